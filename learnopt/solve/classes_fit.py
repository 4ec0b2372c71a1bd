"""The fit of a task with several classes: verdict first, one coefficient per feature and class.

``coef`` is a DataFrame (features x class labels; a reference class's column is 0), ``intercept``
a Series by label. ``decision(data)`` gives the scores x'w_k + b_k, ``probability(data)`` the
class probabilities softmax(scores) (multinomial loss only), ``predict(data)`` the label with
the highest score. Prices and binding follow :mod:`learnopt.solve.fit`: the fall in the optimal
objective per unit relaxation of a rule, and whether it holds with equality.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pandas as pd
from scipy.special import logsumexp, softmax

from learnopt.core.errors import DataError, ParameterError
from learnopt.core.status import CAUTION, Status
from learnopt.data.table import new_design, sorted_labels
from learnopt.solve import classes_file
from learnopt.solve.certificate import Certificate
from learnopt.solve.timings import Attempt, Timings


@dataclass(frozen=True, kw_only=True)
class ClassesFit:
    """The answer to a task with several classes, with its evidence.

    Attributes
    ----------
    status : "optimal" only when learnopt's certificate shows a relative gap <= gap_tol and every
        rule holds within feas_tol; else "unverified", "infeasible" or "failed".
    message : one sentence explaining the status.
    objective, gap, rel_gap, violation : as for a :class:`~learnopt.solve.fit.Fit`.
    coef : DataFrame, one row per feature and one column per class label.
    intercept : Series by class label (zeros without an intercept).
    identification : "sum to zero" or "reference class <label>" (see :mod:`learnopt.problem.classes`).
    prices, binding : Series by rule text.
    """

    status: Status
    message: str
    objective: float
    gap: float
    rel_gap: float
    violation: float
    coef: pd.DataFrame
    intercept: pd.Series
    identification: str
    prices: pd.Series
    binding: pd.Series
    timings: Timings
    solver: str | None
    route: str
    attempts: tuple[Attempt, ...] = ()
    certificate: Certificate | None = None
    task: Any = field(repr=False, default=None)

    def __post_init__(self):
        object.__setattr__(self, "status", Status(self.status))
        object.__setattr__(self, "attempts", tuple(self.attempts))

    @property
    def labels(self) -> tuple:
        return tuple(self.coef.columns)

    # ---- new data
    def _need_point(self, what: str):
        if not self.status.has_point:
            raise ParameterError(f"{what}: this fit is {self.status} and has no coefficients to use "
                                 f"({self.message}).")

    def decision(self, data) -> pd.DataFrame:
        """Scores x'w_k + b_k per row and class (the reference class's are 0)."""
        self._need_point("decision()")
        X = new_design(self.task.dataset, data)
        scores = np.asarray(X @ self.coef.to_numpy()) + self.intercept.to_numpy()
        return pd.DataFrame(scores, columns=self.coef.columns, index=_index(data))

    def probability(self, data) -> pd.DataFrame:
        """Class probabilities softmax(scores) per row (multinomial loss only); rows sum to 1."""
        if not self.task.loss.probabilities:
            raise ParameterError(f"probability(): the {self.task.loss.describe()} loss gives scores, not "
                                 f"probabilities; fit with loss='logistic' (multinomial) for probabilities, or "
                                 f"use decision() for the scores.")
        scores = self.decision(data)
        return pd.DataFrame(softmax(scores.to_numpy(), axis=1), columns=scores.columns, index=scores.index)

    def predict(self, data) -> np.ndarray:
        """The label with the highest score per row (ties: the label that sorts first)."""
        scores = self.decision(data).to_numpy()
        return np.asarray(self.labels, dtype=object)[scores.argmax(axis=1)]

    def evaluate(self, data, target=None) -> pd.Series:
        """Rows, accuracy and the mean loss on new rows (the log loss for the multinomial loss).

        ``target``: the label column's name (default the task's target) or one label per row."""
        truth = _truth(self, data, target)
        scores = self.decision(data).to_numpy()
        unknown = sorted({str(v) for v in truth if v not in self.labels})
        if unknown:
            raise DataError(f"evaluate(): the new rows hold labels the fit does not know ({', '.join(unknown)}); "
                            f"its classes are {list(self.labels)}.")
        y = np.array([self.labels.index(v) for v in truth])
        out = {"rows": float(len(y)), "accuracy": float(np.mean(scores.argmax(axis=1) == y))}
        if self.task.loss.probabilities:
            out["log_loss"] = float(np.mean(logsumexp(scores, axis=1) - scores[np.arange(len(y)), y]))
        else:
            out["mean_loss"] = float(np.mean(self.task.loss.value(scores, y)))
        return pd.Series(out)

    def bootstrap(self, *args, **kwargs):
        """Not available for several classes yet (refused with the reason)."""
        raise ParameterError("bootstrap(): refits of a fit with several classes are not available yet.",
                             parameters=("bootstrap",))

    def intervals(self, *args, **kwargs):
        """Prediction intervals belong to regression fits (refused with the reason)."""
        raise ParameterError("intervals(): prediction intervals are for regression fits; a fit with several "
                             "classes gives class probabilities (probability()).", parameters=("intervals",))

    # ---- display
    def coefficients(self) -> pd.DataFrame:
        """Coefficients by feature (rows) and class (columns), the intercepts as a last row."""
        table = self.coef.copy()
        if self.task is not None and self.task.intercept:
            table.loc["intercept"] = self.intercept
        table.index.name = "name"
        return table

    def summary(self) -> str:
        lines = [f"status     {self.status}  ({self.message})",
                 f"objective  {self.objective:.10g}",
                 f"gap        {self.gap:.3g} (relative {self.rel_gap:.3g}), worst violation {self.violation:.3g} (absolute)",
                 f"solver     {self.solver}  route {self.route}",
                 f"classes    {len(self.labels)} ({', '.join(map(str, self.labels))}); {self.identification}",
                 "timings    " + ", ".join(f"{k} {v:.3f}s" for k, v in self.timings.as_dict().items()),
                 self.coefficients().to_string(float_format=lambda v: "0" if v == 0 else f"{v:.6g}")]
        if len(self.prices):
            lines.append("rules (price: fall in the objective per unit of relaxation):")
            lines.append(pd.DataFrame({"price": self.prices, "binds": self.binding}).to_string())
        lines.append(CAUTION)
        return "\n".join(lines)

    def save(self, path, *, run: str | None = None) -> None:
        """Write the fit as a model file (JSON, atomically); ``lo.load_fit(path)`` reads it back."""
        classes_file.save(self, path, run=run)

    @classmethod
    def load(cls, path, *, task_type=None) -> "ClassesFit":
        """Read a fit written by :meth:`save` (its task describes the problem; no training data)."""
        return cls(**classes_file.read(path, **({"task_type": task_type} if task_type is not None else {})))

    def to_dict(self, *, run: str | None = None) -> dict:
        """The fit as plain data (JSON): evidence, coefficients by class, the rules' prices."""
        return {"kind": "classes", "run": run, "classes": [str(v) for v in self.labels],
                "evidence": {"status": str(self.status), "message": self.message, "objective": self.objective,
                             "gap": self.gap, "rel_gap": self.rel_gap, "violation": self.violation,
                             "solver": self.solver, "route": self.route, "identification": self.identification,
                             "timings": self.timings.as_dict()},
                "coefficients": {str(k): {n: float(v) for n, v in col.items()}
                                 for k, col in self.coefficients().items()},
                "rules": {rule: {"price": float(self.prices[rule]), "binds": bool(self.binding[rule])}
                          for rule in self.prices.index}}

    def __repr__(self) -> str:
        return (f"ClassesFit(status={self.status.value!r}, objective={self.objective:.8g}, gap={self.gap:.3g}, "
                f"classes={len(self.labels)}, solver={self.solver!r})")


def _index(data):
    return data.index if isinstance(data, pd.DataFrame) else None


def _truth(fit: ClassesFit, data, target):
    if target is None:
        name = fit.task.target_name
        if not isinstance(data, pd.DataFrame) or name is None or name not in data.columns:
            raise DataError(f"evaluate(): give target= (the label column's name or one label per row); "
                            f"the new data has no column {name!r}.")
        values = data[name].tolist()
    elif isinstance(target, str) and isinstance(data, pd.DataFrame):
        if target not in data.columns:
            raise DataError(f"evaluate(target={target!r}): the new data has no such column.")
        values = data[target].tolist()
    else:
        values = list(np.asarray(target, dtype=object).ravel())
    sorted_labels(values, "of the new rows")          # missing labels refused here
    return values



