"""Metrics of a fit on (held-out) data.

Regression: n, loss (the task's own loss, mean over rows), mse, rmse, mae, r2.
Classification: n, loss (the surrogate), accuracy, zero_one (error rate), inside_margin
(fraction of rows with label*score < 1, i.e. on the wrong side of the margin) and the
confusion table (rows: true label, columns: predicted label).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from learnopt.core.errors import DataError
from learnopt.data.gateway import is_sharded_source
from learnopt.scale.passes import evaluation_sums


@dataclass
class Evaluation:
    """Metrics (a pandas Series) and, for classification, the confusion table."""

    metrics: pd.Series
    confusion: pd.DataFrame | None = None

    def __getitem__(self, key: str) -> float:
        return float(self.metrics[key])

    def __repr__(self) -> str:
        out = self.metrics.to_string(float_format=lambda v: f"{v:.6g}")
        if self.confusion is not None:
            out += "\nconfusion (rows true, columns predicted):\n" + self.confusion.to_string()
        return out


def evaluate(fit, data, target=None) -> Evaluation:
    task = fit.task
    if is_sharded_source(data):
        if target is not None:
            raise DataError("evaluate() on sharded data reads the target from its column; leave target=None.")
        return _sharded(fit, data)
    if target is None:
        if not isinstance(data, pd.DataFrame) or not isinstance(task.target_name, str):
            raise DataError("evaluate() needs the true targets: give a DataFrame with the target "
                            f"column{'' if not isinstance(task.target_name, str) else ' ' + repr(task.target_name)}, "
                            "or pass target=array.")
        if task.target_name not in data.columns:
            raise DataError(f"The evaluation data has no target column {task.target_name!r}.")
        y_raw = data[task.target_name].to_numpy()
    else:
        y_raw = np.asarray(target).ravel()
    score = np.asarray(fit.decision(data), dtype=float)
    if len(y_raw) != len(score):
        raise DataError(f"{len(y_raw)} targets for {len(score)} rows.")
    if task.kind == "regression":
        try:
            y = np.asarray(y_raw, dtype=float)
        except (TypeError, ValueError):
            raise DataError("The evaluation target must be numeric for a regression.") from None
        if not np.all(np.isfinite(y)):
            raise DataError("The evaluation target has missing or infinite values; drop those rows.")
        r = score - y
        ss = float(np.sum((y - y.mean()) ** 2))
        metrics = pd.Series({
            "n": float(len(y)), "loss": float(np.mean(task.loss.value(r))),
            "mse": float(np.mean(r ** 2)), "rmse": float(np.sqrt(np.mean(r ** 2))),
            "mae": float(np.mean(np.abs(r))), "r2": 1.0 - float(np.sum(r ** 2)) / ss if ss > 0 else np.nan,
        })
        return Evaluation(metrics)
    neg, pos = task.dataset.labels
    unknown = sorted({v for v in y_raw.tolist() if v != neg and v != pos}, key=str)
    if unknown:
        raise DataError(f"The evaluation target has labels {unknown[:5]} that the task does not know; "
                        f"known labels: {neg!r}, {pos!r}.")
    y = np.where(y_raw == pos, 1.0, -1.0)
    m = y * score
    pred = np.where(score > 0, 1.0, -1.0)
    loss_value = np.mean(task.loss.value(m)) if task.loss.convex else np.nan
    metrics = pd.Series({
        "n": float(len(y)), "loss": float(loss_value), "accuracy": float(np.mean(pred == y)),
        "zero_one": float(np.mean(pred != y)), "inside_margin": float(np.mean(m < 1)),
    })
    names = [neg, pos]
    table = pd.DataFrame([[int(np.sum((y == t) & (pred == p))) for p in (-1.0, 1.0)] for t in (-1.0, 1.0)],
                         index=pd.Index(names, name="true"), columns=pd.Index(names, name="predicted"))
    return Evaluation(metrics, table)


def _sharded(fit, data) -> Evaluation:
    """The same metrics on sharded held-out data, from row sums computed partition by partition."""
    task = fit.task
    s = evaluation_sums(task, fit.coef.to_numpy(), fit.intercept, data)
    n = s[0]
    if task.kind == "regression":
        return Evaluation(pd.Series({
            "n": n, "loss": s[1] / n, "mse": s[2] / n, "rmse": float(np.sqrt(s[2] / n)), "mae": s[3] / n,
            "r2": 1.0 - s[2] / s[5] if s[5] > 0 else np.nan}))
    names = list(task.dataset.labels)
    metrics = pd.Series({"n": n, "loss": s[1] / n if task.loss.convex else np.nan, "accuracy": s[2] / n,
                         "zero_one": 1.0 - s[2] / n, "inside_margin": s[3] / n})
    table = pd.DataFrame(np.asarray(s[4:8], dtype=int).reshape(2, 2), index=pd.Index(names, name="true"),
                         columns=pd.Index(names, name="predicted"))
    return Evaluation(metrics, table)
