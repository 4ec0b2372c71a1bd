"""The fit: one result type with fixed fields, verdict first.

Prices: ``fit.prices[rule]`` is the fall in the optimal objective per unit relaxation of the
rule, in objective units (for "<=" and ">=" rules: per unit the bound moves outward, always
>= 0; for "==" rules: per unit increase of the right-hand side, signed; for prediction rules
over many rows: all selected rows relaxed together). ``fit.binding[rule]`` is True when the
rule holds with equality (within tolerance) at the returned point.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import TYPE_CHECKING, Any

import numpy as np
import pandas as pd

from learnopt.solve.certificate import Certificate
from learnopt.core.errors import DataError
from learnopt.data.gateway import is_sharded_source

if TYPE_CHECKING:  # pragma: no cover
    from learnopt.solve.evaluation import Evaluation

def _partition_values(part: pd.DataFrame, encoding, w, b, labels, what: str) -> pd.Series:
    """Scores, predictions or probabilities of one partition (run on a dask worker)."""
    from learnopt.data.table import design
    if len(part) == 0:
        return pd.Series([], dtype=object if what == "prediction" and labels else float, name=what)
    score = design(encoding, part.reset_index(drop=True)) @ w + b
    if what == "probability":
        from scipy.special import expit
        values = expit(score)
    elif what == "prediction" and labels is not None:
        values = np.where(score > 0, labels[1], labels[0]).astype(object)
    else:
        values = score
    return pd.Series(values, index=part.index, name=what)


STATUSES = ("optimal", "unverified", "infeasible", "unbounded", "failed")

DISCLAIMER = ("This fit is a statistical estimate; decisions based on it follow local rules "
              "and professional judgement.")


@dataclass(frozen=True)
class Attempt:
    """One solver run: what was tried and what came of it."""

    solver: str
    outcome: str          # solver status, certificate verdict or the error
    objective: float = np.nan
    gap: float = np.nan
    seconds: float = 0.0


@dataclass
class Timings:
    """Seconds spent, measured by learnopt: build, compile, solve, certify, total."""

    build: float = 0.0
    compile: float = 0.0
    solve: float = 0.0
    certify: float = 0.0
    total: float = 0.0

    def as_dict(self) -> dict[str, float]:
        return dict(build=self.build, compile=self.compile, solve=self.solve,
                    certify=self.certify, total=self.total)

    def __repr__(self) -> str:
        return "Timings(" + ", ".join(f"{k}={v:.4f}s" for k, v in self.as_dict().items()) + ")"


@dataclass
class Fit:
    """The answer to a task, with its evidence.

    Attributes
    ----------
    status : one of "optimal", "unverified", "infeasible", "unbounded", "failed".
        "optimal" only when learnopt's own certificate shows a relative gap <= gap_tol and
        every requirement holds within feas_tol.
    message : one sentence explaining the status.
    objective : the objective recomputed in numpy at the returned point.
    gap : certified duality gap (absolute, objective units); ``rel_gap`` = gap / max(1, |objective|).
    violation : worst requirement violation at the returned point (absolute).
    coef : pandas Series of coefficients by feature name; ``intercept`` a float (0 without one).
    prices, binding : pandas Series by rule text (see module docstring for the sign convention).
    conflicts : for infeasible tasks, Series rule -> amount it must give for the rest to hold.
    timings : :class:`Timings`; solver : name of the solver that produced the point;
    route : how the task was solved; attempts : every solver tried, with its outcome.
    """

    status: str
    message: str
    objective: float
    gap: float
    rel_gap: float
    violation: float
    coef: pd.Series
    intercept: float
    prices: pd.Series
    binding: pd.Series
    conflicts: pd.Series
    timings: Timings
    solver: str | None
    route: str
    attempts: list[Attempt]
    certificate: Certificate | None
    task: Any = field(repr=False, default=None)
    extras: dict = field(default_factory=dict, repr=False)

    # ---- the point
    @property
    def theta(self) -> np.ndarray:
        """The point as one vector: coefficients, then the intercept when the task has one."""
        w = self.coef.to_numpy()
        return np.append(w, self.intercept) if self.task is not None and self.task.intercept else w

    def coefficients(self) -> pd.DataFrame:
        """Coefficients by name with the intercept as a last row (when the task has one)."""
        table = pd.DataFrame({"coefficient": self.coef})
        table.index.name = "name"
        if self.task is not None and self.task.intercept:
            table.loc["intercept"] = self.intercept
        return table

    # ---- predictions
    def _scores(self, data) -> np.ndarray:
        from learnopt.data.table import new_design
        self._need_point()
        X = new_design(self.task.dataset, data)
        return np.asarray(X @ self.coef.to_numpy() + self.intercept).ravel()

    @staticmethod
    def _shaped(values: np.ndarray, data, name: str):
        """pandas in, pandas out: a Series on the input's index when the input was a DataFrame."""
        if isinstance(data, pd.DataFrame):
            return pd.Series(values, index=data.index, name=name)
        return values

    def _partitionwise(self, data, what: str):
        """The same values computed partition by partition on sharded data: a lazy dask Series
        (nothing is computed or loaded until the caller asks)."""
        from learnopt.data.sharded import as_frame
        self._need_point()
        enc = self.task.dataset.encoding
        if enc is None:
            raise DataError("This fit was built from arrays; predictions on a dask DataFrame or a file "
                            "pattern need a fit built from a table (named columns).")
        ddf, _ = as_frame(data)
        labels = self.task.dataset.labels if self.task.kind == "classification" else None
        dtype = object if what == "prediction" and labels is not None else float
        return ddf.map_partitions(_partition_values, enc, self.coef.to_numpy(), self.intercept, labels, what,
                                  meta=pd.Series([], dtype=dtype, name=what))

    def decision(self, data):
        """Raw predictions X w + b on new data (for classification: the score, sign = class)."""
        if is_sharded_source(data):
            return self._partitionwise(data, "score")
        return self._shaped(self._scores(data), data, "score")

    def predict(self, data):
        """Predictions on new data: values for regression, labels for classification.

        A Series with the input's index when ``data`` is a DataFrame, else a numpy array; for a
        dask DataFrame or a file pattern, a lazy dask Series computed partition by partition."""
        if is_sharded_source(data):
            return self._partitionwise(data, "prediction")
        score = self._scores(data)
        labels = self.task.dataset.labels
        if self.task.kind == "classification":
            return self._shaped(np.where(score > 0, labels[1], labels[0]), data, "prediction")
        return self._shaped(score, data, "prediction")

    def probability(self, data):
        """P(positive label) for logistic fits: 1 / (1 + exp(-score))."""
        if self.task.loss.name != "logistic":
            raise DataError("probability() needs a logistic fit; hinge-type scores are not probabilities.")
        if is_sharded_source(data):
            return self._partitionwise(data, "probability")
        from scipy.special import expit
        return self._shaped(expit(self._scores(data)), data, "probability")

    def evaluate(self, data, target=None) -> "Evaluation":
        """Metrics on (usually held-out) data, with the target in the same column as in training."""
        from learnopt.solve.evaluation import evaluate
        self._need_point()
        return evaluate(self, data, target)

    def _need_point(self):
        if self.status in ("infeasible", "unbounded", "failed") and not np.all(np.isfinite(self.coef)):
            raise DataError(f"This fit has status {self.status!r} and no coefficients to predict with: "
                            f"{self.message}")

    # ---- model files
    def save(self, path) -> None:
        """Write this fit to a JSON model file (atomically; no pickle). Read it with ``lo.load_fit``."""
        from learnopt.solve.fitfile import save
        save(self, path)

    # ---- display
    def summary(self) -> str:
        lines = [f"status     {self.status}  ({self.message})",
                 f"objective  {self.objective:.10g}",
                 f"gap        {self.gap:.3g} (relative {self.rel_gap:.3g}), worst violation {self.violation:.3g}",
                 f"solver     {self.solver}  route {self.route}",
                 *([f"KKT        stationarity {self.certificate.stationarity:.3g} (before repair), "
                    f"complementarity {self.certificate.complementarity:.3g}"] if self.certificate else []),
                 "timings    " + ", ".join(f"{k} {v:.3f}s" for k, v in self.timings.as_dict().items()),
                 *([self._sharded_line()] if self.route == "sharded" and "passes" in self.extras else [])]
        table = pd.DataFrame({"coef": self.coef})
        lines.append(table.to_string(float_format=lambda v: f"{v:.6g}"))
        if self.task is not None and self.task.intercept:
            lines.append(f"intercept  {self.intercept:.6g}")
        if len(self.prices):
            pr = pd.DataFrame({"price": self.prices, "binding": self.binding})
            lines.append(pr.to_string(float_format=lambda v: f"{v:.6g}"))
        if len(self.conflicts):
            lines.append("conflicting rules (amount each must give):")
            lines.append(self.conflicts.to_string())
        lines.append(DISCLAIMER)
        return "\n".join(lines)

    def _sharded_line(self) -> str:
        e = self.extras
        data = e.get("data_seconds", 0.0)
        rounds = f", {e['rounds']} rounds" if e.get("rounds") else ""
        return (f"sharded    method {e.get('method')}, {e.get('partitions')} partitions{rounds}, "
                f"{e.get('passes')} data passes {data:.3f}s, client {max(self.timings.total - data, 0.0):.3f}s")

    def __repr__(self) -> str:
        return (f"Fit(status={self.status!r}, objective={self.objective:.8g}, gap={self.gap:.3g}, "
                f"solver={self.solver!r}, route={self.route!r})")
