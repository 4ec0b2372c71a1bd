"""Prediction intervals with a coverage guarantee, calibrated on rows the fit did not see.

Split conformal (Vovk, Gammerman and Shafer 2005; Lei, G'Sell, Rinaldo, Tibshirani and
Wasserman 2018, "Distribution-free predictive inference for regression", sec. 2.2): with scores
s_i = |y_i - prediction_i| on n calibration rows, the margin q is the k-th smallest score,
k = ceil((n + 1) * level), and the interval is prediction +/- q.

Conformalised quantile regression (Romano, Patterson and Candes 2019, "Conformalized quantile
regression", sec. 4): a lower and an upper quantile fit at (1 - level)/2 and (1 + level)/2 are
made on the training rows (the task's penalties and rules kept); scores
s_i = max(lower_i - y_i, y_i - upper_i); the interval is [lower - q, upper + q]. The band
adapts its width to the rows.

Guarantee (both methods): when the calibration rows and a new row are exchangeable (for example
independent draws from one population), the new row's target falls inside its interval with
probability at least ``level``, and (scores without ties) at most level + 1/(n + 1). It is a
statement about rows on average, not about each row, and it does not hold for rows from another
population (a later period, another region).
"""
from __future__ import annotations

import math
from dataclasses import dataclass, field, replace

import numpy as np
import pandas as pd

from learnopt.core import checks as params
from learnopt.core.errors import DataError
from learnopt.core.status import CAUTION
from learnopt.terms.linear_losses import Quantile, quantile

METHODS = ("residual", "quantile")


@dataclass(frozen=True, eq=False)
class Intervals:
    """Calibrated prediction intervals; ``predict`` gives them at new rows, ``coverage``
    measures them on rows with known targets.

    Attributes
    ----------
    method : "residual" (split conformal) or "quantile" (conformalised quantile fits).
    level : the coverage asked for. margin : the calibrated widening q (target units).
    calibration_rows : n; ``guarantee`` is (level, level + 1/(n + 1)).
    bands : for "quantile", the lower and upper quantile fits (else None).
    """

    method: str
    level: float
    margin: float
    calibration_rows: int
    fit: object = field(repr=False)
    bands: tuple | None = field(default=None, repr=False)

    @property
    def guarantee(self) -> tuple[float, float]:
        return self.level, min(1.0, self.level + 1.0 / (self.calibration_rows + 1))

    def _edges(self, data) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
        centre = np.asarray(self.fit.decision(data), float)
        if self.bands is None:
            return centre, centre - self.margin, centre + self.margin
        lower, upper = (np.asarray(b.decision(data), float) for b in self.bands)
        return centre, lower - self.margin, upper + self.margin

    def predict(self, data) -> pd.DataFrame:
        """prediction, low and high at each row of ``data`` (the index of a DataFrame kept)."""
        centre, low, high = self._edges(data)
        index = data.index if isinstance(data, pd.DataFrame) else pd.RangeIndex(len(centre))
        return pd.DataFrame({"prediction": centre, "low": low, "high": high}, index=index)

    def coverage(self, data, target=None) -> dict:
        """The share of rows of ``data`` whose target falls inside its interval, with the row
        count and the mean width, next to the level asked for, the guarantee's range, and the
        range the measured share usually falls in on that many rows."""
        y = targets(self.fit, data, target, "coverage")
        _, low, high = self._edges(data)
        inside = (y >= low) & (y <= high)
        return {"rows": int(len(y)), "covered": float(np.mean(inside)), "level": self.level,
                "guarantee": list(self.guarantee), "usual_range": list(sampling_range(self.level, len(y))),
                "mean_width": float(np.mean(high - low))}

    def to_dict(self) -> dict:
        return {"method": self.method, "level": self.level, "margin": self.margin,
                "calibration_rows": self.calibration_rows, "guarantee": list(self.guarantee),
                "caution": self.caution()}

    def caution(self) -> str:
        return ("Intervals calibrated on held-out rows: a new row from the same population falls inside with "
                f"probability at least {self.level:g} (over rows, not for each row); rows from another population "
                f"or period are not covered by this guarantee. {CAUTION}")

    def __repr__(self) -> str:
        lo, hi = self.guarantee
        return (f"Intervals(method={self.method!r}, level={self.level:g}, margin={self.margin:.6g}, "
                f"calibration_rows={self.calibration_rows}, guarantee=[{lo:g}, {hi:.4g}])")


def sampling_range(level: float, rows: int) -> tuple[float, float]:
    """Where coverage measured on ``rows`` new rows usually falls (about 95% of the time) when
    the true coverage is ``level``: level +/- 2 binomial standard deviations (common practice)."""
    sd = float(np.sqrt(level * (1 - level) / max(rows, 1)))
    return max(0.0, level - 2 * sd), min(1.0, level + 2 * sd)


def targets(fit, data, target, verb: str) -> np.ndarray:
    """The true targets of ``data`` (its target column, or ``target``), numeric and finite."""
    task = fit.task
    if target is None:
        name = task.target_name
        if not isinstance(data, pd.DataFrame) or not isinstance(name, str) or name not in data.columns:
            raise DataError(f"{verb}(): the rows need their true targets: give a DataFrame with the target column "
                            f"{name!r}, or pass target=array." if isinstance(name, str) else
                            f"{verb}(): the task was built from arrays; pass target=array with the true targets.")
        raw = data[name].to_numpy()
    else:
        raw = np.asarray(target).ravel()
    try:
        y = np.asarray(raw, dtype=float)
    except (TypeError, ValueError):
        raise DataError(f"{verb}(): the target has values that are not numbers; intervals are for regression.") \
            from None
    bad = np.flatnonzero(~np.isfinite(y))
    if bad.size:
        raise DataError(f"{verb}(): the target is missing or infinite on {bad.size} row(s) (first at position "
                        f"{bad[0]}); drop those rows.")
    return y


def calibrate(fit, data, target=None, *, level: float = 0.9, method: str | None = None) -> Intervals:
    """Calibrate intervals for ``fit`` on held-out ``data``; see the module docstring."""
    params.check("intervals", level=(level, params.OPEN_UNIT))
    task = fit.task
    if task is None or task.kind != "regression":
        raise DataError("intervals(): prediction intervals are for regression fits; this fit is a "
                        f"{getattr(task, 'kind', 'fit without a task')}.")
    is_quantile = isinstance(task.loss, Quantile)
    method = method or ("quantile" if is_quantile else "residual")
    if method not in METHODS:
        raise params.refusal("intervals", "method", method,
                             f"one of {', '.join(map(repr, METHODS))}{params.nearest(str(method), METHODS, show=repr)}")
    y = targets(fit, data, target, "intervals")
    n = len(y)
    k = math.ceil((n + 1) * level - 1e-9)     # (the small shift keeps 10 * 0.9 at 9, not 10)
    if k > n:
        need = math.ceil(level / (1 - level) - 1e-9)
        raise DataError(f"intervals(level={level:g}): {n} calibration row(s) are too few; level {level:g} needs "
                        f"at least {need} (with fewer the interval would have no upper end). Hold out more rows, "
                        f"or ask for a lower level.")
    bands = None
    if method == "quantile":
        bands = _band_fits(fit, level)
        lower, upper = (np.asarray(b.decision(data), float) for b in bands)
        scores = np.maximum(lower - y, y - upper)
    else:
        scores = np.abs(y - np.asarray(fit.decision(data), float))
    margin = float(np.sort(scores)[k - 1])
    return Intervals(method, float(level), margin, n, fit, bands)


def _band_fits(fit, level: float):
    """The lower and upper quantile fits on the training rows (penalties and rules kept)."""
    task = fit.task
    if getattr(task.dataset, "X", None) is None or not hasattr(task, "solve"):
        raise DataError("intervals(method='quantile'): the band fits need the training rows, and this fit holds "
                        "none (it was read from a model file); use method='residual', or solve the task again.")
    bands = []
    for tau in ((1 - level) / 2, (1 + level) / 2):
        band = replace(task, loss=quantile(tau)).solve(progress=False)
        if not band.status.has_point:
            raise DataError(f"intervals(method='quantile'): the {tau:g} quantile fit ended {band.status.value!r} "
                            f"({band.message}); use method='residual'.")
        bands.append(band)
    return tuple(bands)
