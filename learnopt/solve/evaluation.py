"""Metrics of a fit on (held-out) data.

Regression: n, loss (the task's own loss, mean over rows), mse, rmse, mae, r2 (for the log-link
losses the errors are of the predicted mean exp(linear predictor), and loss is the mean half
deviance).
Classification: n, loss (the surrogate), accuracy, zero_one (error rate), inside_margin
(fraction of rows with label*score < 1, i.e. on the wrong side of the margin) and the
confusion table (rows: true label, columns: predicted label).

With the rows in memory, the task's rules are also checked on the new rows (``rules``; see
:mod:`learnopt.solve.rule_checks`), and with ``groups=`` the metrics are compared across groups
of rows (``groups`` and ``gaps``; see :mod:`learnopt.solve.comparison`). On sharded data the
rules are not checked (a note says so) and ``groups=`` is refused.
"""
from __future__ import annotations

import json
import os
from dataclasses import dataclass

import numpy as np
import pandas as pd

from learnopt.core.errors import DataError
from learnopt.data.gateway import is_sharded_source
from learnopt.data.table import read_table
from learnopt.scale.passes import evaluation_sums
from learnopt.solve.comparison import classification_groups, group_labels, groups_shown, regression_groups
from learnopt.solve.rule_checks import rules_on_new_rows

SHARDED_RULES = ("the rules are not checked on sharded data; check them on rows in memory, "
                 "e.g. fit.evaluate(data.head(100_000)) or on a sample.")


@dataclass
class Evaluation:
    """Metrics (a pandas Series), for classification the confusion table, and when asked for:

    rules : DataFrame, one row per rule of the task, measured on the new rows (None on sharded
        data); see :func:`learnopt.solve.rule_checks.rules_on_new_rows` for the columns.
    groups : DataFrame, one row per group (``evaluate(..., groups=...)``); gaps : Series, the
        largest gap between groups of each metric (see :mod:`learnopt.solve.comparison`).
    notes : what to know when reading the above (undefined rates, rules not checked).
    """

    metrics: pd.Series
    confusion: pd.DataFrame | None = None
    rules: pd.DataFrame | None = None
    groups: pd.DataFrame | None = None
    gaps: pd.Series | None = None
    notes: tuple[str, ...] = ()

    def __getitem__(self, key: str) -> float:
        return float(self.metrics[key])

    def __repr__(self) -> str:
        number = lambda v: f"{v:.6g}"          # noqa: E731
        out = self.metrics.to_string(float_format=number)
        if self.confusion is not None:
            out += "\nconfusion (rows true, columns predicted):\n" + self.confusion.to_string()
        if self.rules is not None and len(self.rules):
            out += "\nrules on the new rows:\n" + self.rules.to_string(float_format=number, na_rep="-")
        if self.groups is not None:
            out += "\nby group:\n" + self.groups.to_string(float_format=number, na_rep="NaN")
            out += "\nlargest gap between groups:\n" + self.gaps.to_string(float_format=number, na_rep="NaN")
        if self.notes:
            out += "\nnotes:\n" + "\n".join(f"- {note}" for note in self.notes)
        return out

    def to_dict(self) -> dict:
        """Everything as plain JSON-ready values (NaN written as None): ``metrics``, ``confusion``
        (true label -> predicted label -> count), ``rules`` (rule -> column -> value), ``groups``
        (group -> metric -> value), ``gaps`` and ``notes``."""
        def plain(x, orient=None):
            if x is None:
                return None
            return json.loads(x.to_json(orient=orient) if orient else x.to_json())
        return {"metrics": plain(self.metrics), "confusion": plain(self.confusion, "index"),
                "rules": plain(self.rules, "index"), "groups": plain(self.groups, "index"),
                "gaps": plain(self.gaps), "notes": list(self.notes)}


def evaluate(fit, data, target=None, groups=None) -> Evaluation:
    task = fit.task
    if is_sharded_source(data):
        if groups is not None:
            raise DataError(f"evaluate(groups={groups_shown(groups)}): comparing groups needs the rows in memory, and "
                            f"these data are sharded; evaluate a pandas DataFrame instead (e.g. "
                            f"data.compute(), or a sample of the rows).")
        if target is not None:
            raise DataError("evaluate() on sharded data reads the target from its column; leave target=None.")
        if task.loss.argument == "linear":
            raise DataError(f"evaluate() of a {task.loss.describe()} fit needs the rows in memory; evaluate a pandas "
                            f"DataFrame (e.g. data.compute(), or a sample of the rows).")
        return _sharded(fit, data)
    if isinstance(data, (str, os.PathLike)):
        data = read_table(data)
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
        if task.loss.argument == "linear":
            task.loss.check_target(y, "of the evaluation data")
            r, loss_value = np.exp(score) - y, float(np.mean(task.loss.given(y).value(score)))
        else:
            r = score - y
            loss_value = float(np.mean(task.loss.value(r)))
        ss = float(np.sum((y - y.mean()) ** 2))
        metrics = pd.Series({
            "n": float(len(y)), "loss": loss_value,
            "mse": float(np.mean(r ** 2)), "rmse": float(np.sqrt(np.mean(r ** 2))),
            "mae": float(np.mean(np.abs(r))), "r2": 1.0 - float(np.sum(r ** 2)) / ss if ss > 0 else np.nan,
        })
        labels = None if groups is None else group_labels(data, groups, len(y))
        shown = np.exp(score) if task.loss.link == "log" else score
        table, gaps, notes = regression_groups(y, shown, labels) if labels is not None else (None, None, [])
        return Evaluation(metrics, rules=rules_on_new_rows(fit, data), groups=table, gaps=gaps, notes=tuple(notes))
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
    labels = None if groups is None else group_labels(data, groups, len(y))
    by_group, gaps, notes = classification_groups(y, pred, labels, names) if labels is not None else (None, None, [])
    return Evaluation(metrics, table, rules=rules_on_new_rows(fit, data), groups=by_group, gaps=gaps,
                      notes=tuple(notes))


def _sharded(fit, data) -> Evaluation:
    """The same metrics on sharded held-out data, from row sums computed partition by partition."""
    task = fit.task
    s = evaluation_sums(task, fit.coef.to_numpy(), fit.intercept, data)
    n = s[0]
    if task.kind == "regression":
        return Evaluation(pd.Series({
            "n": n, "loss": s[1] / n, "mse": s[2] / n, "rmse": float(np.sqrt(s[2] / n)), "mae": s[3] / n,
            "r2": 1.0 - s[2] / s[5] if s[5] > 0 else np.nan}), notes=_sharded_notes(task))
    names = list(task.dataset.labels)
    metrics = pd.Series({"n": n, "loss": s[1] / n if task.loss.convex else np.nan, "accuracy": s[2] / n,
                         "zero_one": 1.0 - s[2] / n, "inside_margin": s[3] / n})
    table = pd.DataFrame(np.asarray(s[4:8], dtype=int).reshape(2, 2), index=pd.Index(names, name="true"),
                         columns=pd.Index(names, name="predicted"))
    return Evaluation(metrics, table, notes=_sharded_notes(task))


def _sharded_notes(task) -> tuple[str, ...]:
    return (SHARDED_RULES,) if getattr(task, "rules", ()) else ()
