"""The fit: one result type with fixed fields, verdict first.

Prices: ``fit.prices[rule]`` is the fall in the optimal objective per unit relaxation of the
rule, in objective units (for "<=" and ">=" rules: per unit the bound moves outward, always
>= 0; for "==" rules: per unit increase of the right-hand side, signed; for prediction rules
over many rows: all selected rows relaxed together). ``fit.binding[rule]`` is True when the
rule holds with equality (within tolerance) at the returned point.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd

from scipy.special import expit

from learnopt.core.checks import nearest
from learnopt.core.errors import DataError
from learnopt.core.status import CAUTION, Status
from learnopt.solve.standing import rule_standing, standing_lines
from learnopt.data.gateway import is_sharded_source
from learnopt.data.offsets import new_offset
from learnopt.data.table import new_design
from learnopt.scale.passes import partition_values
from learnopt.solve import fitfile
from learnopt.solve.bootstrap import Bootstrap, bootstrap
from learnopt.solve.certificate import Certificate
from learnopt.solve.conformal import Intervals, calibrate
from learnopt.solve.evaluation import Evaluation, evaluate
from learnopt.solve.timings import Attempt, Timings



@dataclass(frozen=True, kw_only=True)
class Fit:
    """The answer to a task, with its evidence.

    Attributes
    ----------
    status : a :class:`~learnopt.core.status.Status` (a string: "optimal", "unverified",
        "infeasible", "unbounded" or "failed").
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

    status: Status
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
    attempts: tuple[Attempt, ...] = ()
    certificate: Certificate | None = None
    task: Any = field(repr=False, default=None)
    extras: dict = field(default_factory=dict, repr=False)

    def __post_init__(self):
        object.__setattr__(self, "status", Status(self.status))
        object.__setattr__(self, "attempts", tuple(self.attempts))

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

    def shape_table(self, feature: str, points: int = 101) -> pd.DataFrame:
        """The fitted effect of a shaped feature (``task.shape``) on a grid over its training
        range (``points`` evenly spaced values plus every knot): columns ``feature`` (the value),
        ``effect`` (the basis coefficients times the basis there; the intercept and the other
        features left out) and ``knot`` (True at a knot)."""
        self._need_point()
        enc = self.task.dataset.encoding
        shapes = enc.shapes if enc is not None else {}
        if feature not in shapes:
            raise DataError(f"shape_table({feature!r}): {feature!r} is not a shaped feature of this fit"
                            f"{nearest(feature, shapes)}; shaped: {', '.join(shapes) or 'none'} (shape one with "
                            f"task.shape(feature, \"increasing\")).")
        b = shapes[feature]
        x = np.union1d(np.linspace(b.low, b.high, max(2, int(points))), b.knots)
        effect = b.columns(x) @ self.coef[list(b.names)].to_numpy()
        return pd.DataFrame({"feature": x, "effect": effect, "knot": np.isin(x, b.knots)})

    # ---- predictions
    def _scores(self, data, offset=None) -> np.ndarray:
        self._need_point()
        X = new_design(self.task.dataset, data)
        score = np.asarray(X @ self.coef.to_numpy() + self.intercept).ravel()
        source = getattr(self.task.dataset, "offset_source", None)
        if source is None and offset is not None:
            raise DataError("offset=... was given, but this fit was trained without an offset or exposure; "
                            "leave it out.")
        extra = new_offset(source, data, score.size, offset)
        return score if extra is None else score + extra

    @staticmethod
    def _shaped(values: np.ndarray, data, name: str):
        """pandas in, pandas out: a Series on the input's index when the input was a DataFrame."""
        if isinstance(data, pd.DataFrame):
            return pd.Series(values, index=data.index, name=name)
        return values

    def _partitionwise(self, data, what: str):
        """The same values computed partition by partition on sharded data: a lazy dask Series
        (nothing is computed or loaded until the caller asks)."""
        self._need_point()
        if getattr(self.task.dataset, "offset_source", None) is not None:
            raise DataError("This fit adds an offset to every prediction; predictions on sharded data do not "
                            "read it yet. Predict on the rows in memory (a pandas DataFrame with the "
                            f"{self.task.dataset.offset_source[0]} column).")
        enc = self.task.dataset.encoding
        if enc is None:
            raise DataError("This fit was built from arrays; predictions on a dask DataFrame or a file "
                            "pattern need a fit built from a table (named columns).")
        labels = self.task.dataset.labels if self.task.kind == "classification" else None
        return partition_values(data, enc, self.coef.to_numpy(), self.intercept, labels, what)

    def decision(self, data, *, offset=None):
        """Raw predictions X w + b on new data (for classification: the score, sign = class); with
        an offset or exposure, the linear predictor X w + b + offset (the offset read from the
        same column as in training, or ``offset=`` values when it was given as an array)."""
        if is_sharded_source(data):
            return self._partitionwise(data, "score")
        return self._shaped(self._scores(data, offset), data, "score")

    def predict(self, data, *, offset=None):
        """Predictions on new data: values for regression (for the log-link losses poisson,
        gamma and tweedie, the mean exp(linear predictor)), labels for classification.

        A Series with the input's index when ``data`` is a DataFrame, else a numpy array; for a
        dask DataFrame or a file pattern, a lazy dask Series computed partition by partition.
        ``offset``: see :meth:`decision`."""
        log_link = self.task.loss.link == "log"
        if is_sharded_source(data):
            return self._partitionwise(data, "mean" if log_link else "prediction")
        score = self._scores(data, offset)
        labels = self.task.dataset.labels
        if self.task.kind == "classification":
            return self._shaped(np.where(score > 0, labels[1], labels[0]), data, "prediction")
        return self._shaped(np.exp(score) if log_link else score, data, "prediction")

    def probability(self, data):
        """P(positive label) for logistic fits: 1 / (1 + exp(-score))."""
        if self.task.loss.name != "logistic":
            raise DataError("probability() needs a logistic fit; hinge-type scores are not probabilities.")
        if is_sharded_source(data):
            return self._partitionwise(data, "probability")
        return self._shaped(expit(self._scores(data)), data, "probability")

    def evaluate(self, data, target=None, *, groups=None) -> "Evaluation":
        """Metrics on (usually held-out) data, with the target in the same column as in training.

        The task's rules are checked on the new rows at this fit's point (``evaluation.rules``).
        ``groups`` (a column of ``data``, or one label per row) adds metrics per group and the
        largest gaps between groups (``evaluation.groups``, ``evaluation.gaps``). See
        :mod:`learnopt.solve.evaluation`."""
        self._need_point()
        return evaluate(self, data, target, groups)

    def intervals(self, data, target=None, *, level: float = 0.9, method: str | None = None) -> Intervals:
        """Prediction intervals calibrated on held-out rows ``data`` (rows the fit did not see):
        split conformal on absolute residuals (``method="residual"``, the default) or, for quantile
        fits, conformalised quantile bands (``"quantile"``); an :class:`~learnopt.solve.conformal.Intervals`
        whose ``predict(new_data)`` gives low/high and ``coverage(test_data)`` measures them.
        A new row from the same population falls inside with probability at least ``level``."""
        self._need_point()
        return calibrate(self, data, target, level=level, method=method)

    def bootstrap(self, n: int = 200, *, seed: int = 0, method: str | None = None, groups=None,
                  level: float = 0.9, jobs: int | None = None, progress: bool | None = None, tol: float = 1e-9,
                  gap_tol: float = 1e-7, feas_tol: float = 1e-6) -> Bootstrap:
        """Refit ``n`` times on rows drawn with replacement, every rule and penalty re-applied
        and every refit certified; a :class:`~learnopt.solve.bootstrap.Bootstrap` with percentile
        intervals, how often each rule binds and each coefficient is zero or on an edge of the rules.

        ``method``: "rows" (default; with row weights, rows drawn in proportion to weight) or
        "groups" (whole groups drawn, ``groups`` a column name or one label per row). ``jobs``:
        worker processes (-1: one per core; None: every core once the refits would take over
        4 s). ``progress``: a bar on a terminal.
        """
        return bootstrap(self, n, seed=seed, method=method, groups=groups, level=level, jobs=jobs,
                         progress=progress, tol=tol, gap_tol=gap_tol, feas_tol=feas_tol)

    def _need_point(self):
        if not self.status.has_point and not np.all(np.isfinite(self.coef)):
            raise DataError(f"This fit has status {self.status!r} and no coefficients to predict with: "
                            f"{self.message}")

    # ---- model files
    def save(self, path, *, run: str | None = None) -> None:
        """Write this fit to a JSON model file (atomically; no pickle). Read it with ``lo.load_fit``.
        ``run`` (a recipe run's identifier) is written inside, covered by the file's digest."""
        fitfile.save(self, path, run=run)

    @classmethod
    def load(cls, path, *, task_type=None) -> "Fit":
        """Read a fit written by :meth:`save`. Its ``task`` describes the problem for prediction
        and evaluation (no training data); ``task_type`` builds it (default: a plain Problem)."""
        return cls(**fitfile.read(path, task_type=task_type))

    def rule_standing(self) -> pd.DataFrame:
        """Where each rule stands: the rules holding the fit back (gain per unit relaxation), then
        the rules with room to spare (room left, and as a share of the limit); see
        :func:`learnopt.solve.standing.rule_standing`."""
        return rule_standing(self)

    def attempt_table(self) -> pd.DataFrame:
        """Every solver tried, in order: outcome, objective, certified gap, seconds."""
        table = pd.DataFrame([{"solver": a.solver, "outcome": a.outcome, "objective": a.objective, "gap": a.gap,
                               "seconds": a.seconds} for a in self.attempts],
                             columns=["solver", "outcome", "objective", "gap", "seconds"])
        return table.set_index("solver")

    # ---- display
    def summary(self) -> str:
        lines = [f"status     {self.status}  ({self.message})",
                 f"objective  {self.objective:.10g}",
                 f"gap        {self.gap:.3g} (relative {self.rel_gap:.3g}), worst violation {self.violation:.3g} (absolute)",
                 f"solver     {self.solver}  route {self.route}",
                 *([f"KKT        stationarity {self.certificate.stationarity:.3g} (before repair), "
                    f"complementarity {self.certificate.complementarity:.3g}"] if self.certificate else []),
                 "timings    " + ", ".join(f"{k} {v:.3f}s" for k, v in self.timings.as_dict().items()),
                 *([self._sharded_line()] if self.route == "sharded" and "passes" in self.extras else [])]
        values = self.coef
        if self.task is not None and self.task.intercept:
            values = pd.concat([values, pd.Series({"intercept": self.intercept})])
        lines.append(values.to_frame("coefficient").to_string(float_format=lambda v: "0" if v == 0 else f"{v:.6g}"))
        if len(self.prices):
            lines += standing_lines(self.rule_standing())
        if len(self.conflicts):
            lines.append("conflicting rules (how far each alone must move, in its own units):")
            lines.append(self.conflicts.to_string())
        if len(self.attempts) > 1:
            lines.append("attempts:")
            lines.append(self.attempt_table()[["outcome", "seconds"]].to_string(float_format=lambda v: f"{v:.3g}"))
        lines.append(CAUTION)
        return "\n".join(lines)

    def _sharded_line(self) -> str:
        e = self.extras
        data = e.get("data_seconds", 0.0)
        rounds = f", {e['rounds']} rounds" if e.get("rounds") else ""
        return (f"sharded    method {e.get('method')}, {e.get('partitions')} partitions{rounds}, "
                f"{e.get('passes')} data passes {data:.3f}s, client {max(self.timings.total - data, 0.0):.3f}s")

    def __repr__(self) -> str:
        return (f"Fit(status={self.status.value!r}, objective={self.objective:.8g}, gap={self.gap:.3g}, "
                f"solver={self.solver!r}, route={self.route!r})")
