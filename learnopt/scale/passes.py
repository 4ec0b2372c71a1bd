"""Whole-data summaries of a fit on sharded data, by passes: the loss argument's histogram (report),
held-out metric sums (evaluation) and predictions partition by partition (lazy)."""
from __future__ import annotations

import numpy as np
import pandas as pd
from scipy.special import expit

from learnopt.core.errors import DataError
from learnopt.data.sharded import BlockSpec, ShardedDataset, as_frame, encode_block
from learnopt.data.encoding import design


def _argument(part, spec, theta, intercept: bool, margin: bool, index: int):
    X, y, _ = encode_block(part, spec, index)
    score = X @ theta[:X.shape[1]] + (theta[-1] if intercept else 0.0)
    return y * score if margin else score - y


def _extent(part, spec, theta, intercept, margin, index):
    z = _argument(part, spec, theta, intercept, margin, index)
    return (float(z.min()), float(z.max())) if len(z) else (np.inf, -np.inf)


def _counts(part, spec, theta, intercept, margin, index, edges):
    return np.histogram(_argument(part, spec, theta, intercept, margin, index), bins=edges)[0]


def argument_histogram(dataset: ShardedDataset, theta, intercept: bool, margin: bool, bins: int = 40):
    """(counts, edges) of the loss argument (residuals or margins) over every row, by two passes."""
    import dask
    from dask import delayed
    parts = dataset.source.to_delayed()
    theta = np.asarray(theta, float)
    spans = dask.compute(*[delayed(_extent)(p, dataset.spec, theta, intercept, margin, k) for k, p in enumerate(parts)])
    low, high = min(s[0] for s in spans), max(s[1] for s in spans)
    edges = np.linspace(low, high if high > low else low + 1.0, bins + 1)
    counts = dask.compute(*[delayed(_counts)(p, dataset.spec, theta, intercept, margin, k, edges)
                            for k, p in enumerate(parts)])
    return np.sum(counts, axis=0), edges


# ---- held-out evaluation by passes

def _evaluation_part(part, spec: BlockSpec, w, b, loss, index: int) -> np.ndarray:
    """This partition's sums for the held-out metrics (see learnopt.solve.evaluation)."""
    X, y, _ = encode_block(part, spec, index)
    score = X @ w + b
    n = float(len(y))
    if spec.kind == "regression":
        r = score - y
        mean = float(y.mean()) if n else 0.0
        return np.array([n, float(np.sum(loss.value(r))), float(r @ r), float(np.abs(r).sum()), mean,
                         float(((y - mean) ** 2).sum())])
    m = y * score
    pred = np.where(score > 0, 1.0, -1.0)
    counts = [float(np.sum((y == t) & (pred == p))) for t in (-1.0, 1.0) for p in (-1.0, 1.0)]
    return np.array([n, float(np.sum(loss.value(m))), float(np.sum(pred == y)), float(np.sum(m < 1)), *counts])


def evaluation_sums(task, w, b, data) -> np.ndarray:
    """Row sums of the held-out metrics over a sharded source (one pass; rows stay where they are).

    Regression: (n, loss, squared residuals, absolute residuals, y's mean and centred sum of
    squares, merged exactly across partitions). Classification: (n, loss, correct, inside the
    margin, the 2 x 2 confusion counts)."""
    import dask
    from dask import delayed
    if task.dataset.encoding is None or not isinstance(task.target_name, str):
        raise DataError("evaluate() on sharded data needs a task built from a table with a named target column.")
    ddf, _ = as_frame(data)
    if task.target_name not in ddf.columns:
        raise DataError(f"The evaluation data has no target column {task.target_name!r}.")
    spec = BlockSpec(task.dataset.encoding, task.target_name, None, task.kind, task.dataset.labels)
    fn = delayed(_evaluation_part, pure=True)
    parts = dask.compute(*[fn(p, spec, np.asarray(w, float), float(b), task.loss, k)
                           for k, p in enumerate(ddf.to_delayed())])
    parts = [p for p in parts if p[0] > 0]
    if not parts:
        raise DataError("The evaluation data has no rows.")
    if task.kind != "regression":
        return np.sum(parts, axis=0)
    total = np.sum(parts, axis=0)
    n = total[0]
    mean = sum(p[0] * p[4] for p in parts) / n
    total[4] = mean
    total[5] = sum(p[5] + p[0] * (p[4] - mean) ** 2 for p in parts)    # Chan et al.'s merge
    return total


# ---- predictions partition by partition (lazy)

def _partition_values(part: pd.DataFrame, encoding, w, b, labels, what: str) -> pd.Series:
    """Scores, predictions or probabilities of one partition (run on a dask worker)."""
    if len(part) == 0:
        return pd.Series([], dtype=object if what == "prediction" and labels else float, name=what)
    score = design(encoding, part.reset_index(drop=True)) @ w + b
    if what == "probability":
        values = expit(score)
    elif what == "mean":                       # log link: the mean exp(linear predictor)
        values = np.exp(score)
    elif what == "prediction" and labels is not None:
        values = np.where(score > 0, labels[1], labels[0]).astype(object)
    else:
        values = score
    return pd.Series(values, index=part.index, name=what)


def partition_values(data, encoding, w, b, labels, what: str):
    """Scores, predictions or probabilities of a dask DataFrame or a file pattern: a lazy dask
    Series computed partition by partition (nothing is read until the caller asks)."""
    ddf, _ = as_frame(data)
    dtype = object if what == "prediction" and labels is not None else float
    name = "prediction" if what == "mean" else what
    return ddf.map_partitions(_partition_values, encoding, w, b, labels, what,
                              meta=pd.Series([], dtype=dtype, name=name)).rename(name)
