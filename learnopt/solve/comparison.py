"""Metrics per group of rows, and the largest gaps between groups.

Regression, per group: ``n``, ``mse``, ``rmse``, ``mae``, ``mean_prediction``, ``mean_target``;
the gap of each is its largest value over the groups minus its smallest.

Classification (the task's second label is the positive one), per group: ``n``,
``positive_rate`` (share of rows predicted positive), ``true_positive_rate`` (share predicted
positive among rows whose true label is positive), ``false_positive_rate`` (share predicted
positive among rows whose true label is negative) and ``accuracy``. Gaps: max minus min of each
rate over the groups, and two published summaries (Hardt, Price and Srebro 2016, "Equality of
opportunity in supervised learning", sec. 2-3; Zafar et al. 2017):

* ``demographic_parity_gap`` = max - min of the positive rate over the groups (0 when the
  prediction is independent of the group);
* ``equalised_odds_gap`` = the larger of the true-positive-rate gap and the false-positive-rate
  gap (0 when the prediction is independent of the group given the true label).

A group with no positive true labels has no true-positive rate (no negative ones: no
false-positive rate): NaN, left out of that gap, and said so in a note.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from learnopt.core.checks import nearest
from learnopt.core.errors import DataError

REGRESSION = ("n", "mse", "rmse", "mae", "mean_prediction", "mean_target")
CLASSIFICATION = ("n", "positive_rate", "true_positive_rate", "false_positive_rate", "accuracy")


def group_labels(data, groups, n: int) -> np.ndarray:
    """One group label per row: the column ``groups`` of ``data``, or ``groups`` itself."""
    said = f"evaluate(groups={groups_shown(groups)})"
    if np.ndim(groups) == 0:
        if not isinstance(data, pd.DataFrame):
            raise DataError(f"{said}: the new rows have no column names (they are an array); give one "
                            f"group label per row instead, e.g. groups=labels.")
        if groups not in data.columns:
            hint = nearest(groups, [str(c) for c in data.columns])
            raise DataError(f"{said}: no column {groups!r} in the data{hint}; name a column of the new "
                            f"rows, or give one group label per row.")
        labels = data[groups].to_numpy()
    else:
        labels = np.asarray(groups, dtype=object)
        if labels.ndim != 1 or len(labels) != n:
            shape = f"{len(labels)} labels" if labels.ndim == 1 else f"an array of shape {labels.shape}"
            raise DataError(f"{said}: {shape} for {n} rows; give one group label per row "
                            f"(or the name of a column of the new rows).")
    missing = pd.isna(pd.Series(labels, dtype=object)).to_numpy()
    if missing.any():
        raise DataError(f"{said}: {int(missing.sum())} of the {n} rows have no group label; fill them "
                        f"(e.g. with 'unknown') or leave those rows out.")
    return labels


def groups_shown(groups) -> str:
    """``groups`` as a message shows it: a column name quoted, labels counted."""
    if np.ndim(groups) == 0:
        return repr(groups)
    return f"<{len(groups) if hasattr(groups, '__len__') else '?'} labels>"


def _order(labels: np.ndarray) -> list:
    found = list(pd.unique(pd.Series(labels, dtype=object)))
    try:
        return sorted(found)
    except TypeError:
        return sorted(found, key=str)


def regression_groups(y: np.ndarray, prediction: np.ndarray, labels: np.ndarray):
    """Per-group regression metrics and their gaps (max - min over the groups)."""
    rows = {}
    for g in _order(labels):
        at = labels == g
        r = prediction[at] - y[at]
        mse = float(np.mean(r ** 2))
        rows[g] = dict(n=int(at.sum()), mse=mse, rmse=float(np.sqrt(mse)), mae=float(np.mean(np.abs(r))),
                       mean_prediction=float(np.mean(prediction[at])), mean_target=float(np.mean(y[at])))
    table = _table(rows, REGRESSION)
    gaps = pd.Series({c: _spread(table[c]) for c in REGRESSION[1:]}, name="gap", dtype=float)
    return table, gaps, []


def classification_groups(y: np.ndarray, predicted: np.ndarray, labels: np.ndarray, names=("-1", "+1")):
    """Per-group rates of a classifier and their gaps.

    ``y`` and ``predicted`` are +1 (the positive label, ``names[1]``) or -1 (``names[0]``)."""
    rows, notes = {}, []
    for g in _order(labels):
        at = labels == g
        t, p = y[at], predicted[at]
        pos, neg = t > 0, t < 0
        rows[g] = dict(n=int(at.sum()), positive_rate=float(np.mean(p > 0)),
                       true_positive_rate=float(np.mean(p[pos] > 0)) if pos.any() else np.nan,
                       false_positive_rate=float(np.mean(p[neg] > 0)) if neg.any() else np.nan,
                       accuracy=float(np.mean(p == t)))
        for rate, kind, label in (("true-positive", pos, names[1]), ("false-positive", neg, names[0])):
            if not kind.any():
                notes.append(f"group {g!r} has no rows whose true label is {label!r}: its {rate} rate is "
                             f"undefined (NaN) and left out of the gaps.")
    table = _table(rows, CLASSIFICATION)
    gaps = pd.Series({c: _spread(table[c]) for c in CLASSIFICATION[1:]}, name="gap", dtype=float)
    gaps["demographic_parity_gap"] = gaps["positive_rate"]
    pair = gaps[["true_positive_rate", "false_positive_rate"]].dropna()
    gaps["equalised_odds_gap"] = float(pair.max()) if len(pair) else np.nan
    return table, gaps, notes


def _table(rows: dict, columns) -> pd.DataFrame:
    table = pd.DataFrame.from_dict(rows, orient="index")[list(columns)]
    table.index.name = "group"
    return table


def _spread(column: pd.Series) -> float:
    known = column.dropna()
    return float(known.max() - known.min()) if len(known) else np.nan
