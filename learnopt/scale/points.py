"""Points of a sharded centres task held on the cluster: assignment statistics, seeding samples,
loads and labels, each by one pass."""
from __future__ import annotations

import hashlib

import numpy as np
import pandas as pd

from learnopt.core.errors import DataError
from learnopt.data.points import assign
from learnopt.data.sharded import ShardedPoints
from learnopt.scale.cluster import connect


def _point_block(part: pd.DataFrame, names, weights, index: int):
    X = part[list(names)].to_numpy(dtype=float)
    w = np.ones(len(X)) if weights is None else part[weights].to_numpy(dtype=float)
    if not np.all(np.isfinite(X)):
        row = int(np.flatnonzero(~np.all(np.isfinite(X), axis=1))[0])
        raise DataError(f"Partition {index} of the data: centres: missing or infinite coordinates (first at "
                        f"row {row}); drop or fill them.")
    if np.any(~np.isfinite(w)) or np.any(w < 0):
        raise DataError(f"Partition {index} of the data: centres: weights must be finite and >= 0.")
    return X, w


def _point_weight(block) -> float:
    return float(block[1].sum())


def _point_stats(block, C):
    """(assignment fingerprint, objective, W, S, (worst w d2, its point)) on one block."""
    X, w = block
    k, d = C.shape
    if len(X) == 0:
        return "", 0.0, np.zeros(k), np.zeros((k, d)), (-np.inf, np.zeros(d))
    labels, d2 = assign(X, C)
    W = np.bincount(labels, weights=w, minlength=k)
    S = np.vstack([np.bincount(labels, weights=w * X[:, j], minlength=k) for j in range(d)]).T
    worst = int(np.argmax(w * d2))
    return (hashlib.blake2b(labels.astype(np.int32).tobytes(), digest_size=16).hexdigest(), float(w @ d2), W, S,
            (float(w[worst] * d2[worst]), X[worst].copy()))


def _point_loads(block, C):
    X, w = block
    k = C.shape[0]
    if len(X) == 0:
        return np.zeros(k), np.zeros(k)
    labels = assign(X, C)[0]
    return np.bincount(labels, weights=w, minlength=k), np.bincount(labels, minlength=k).astype(float)


def _point_sample(block, size: int, total: float, seed: int, index: int):
    """About size * (this block's weight / total) points drawn in proportion to their weights."""
    X, w = block
    if len(X) == 0 or w.sum() <= 0:
        return np.zeros((0, X.shape[1]))
    rng = np.random.default_rng([seed, index])
    m = rng.poisson(size * w.sum() / total)
    return X[rng.choice(len(X), size=m, p=w / w.sum())] if m else np.zeros((0, X.shape[1]))


def _partition_labels(part: pd.DataFrame, names, C) -> pd.Series:
    if len(part) == 0:
        return pd.Series([], dtype=np.int64, name="centre")
    return pd.Series(assign(part[list(names)].to_numpy(dtype=float), C)[0] + 1, index=part.index, name="centre")


class PointBlocks:
    """The points of a sharded centres task held on the cluster for one solve."""

    SAMPLE = 20_000    # seeding sample size (k-means++ runs on it; the steps use every point)

    def __init__(self, points: ShardedPoints, client=None):
        from dask import delayed
        self.client = connect(client)
        self.points = points
        fn = delayed(_point_block, pure=True)
        self.futures = self.client.compute([fn(part, points.names, points.weights, k)
                                            for k, part in enumerate(points.source.to_delayed())])
        self.total = float(sum(self.client.gather(self.client.map(_point_weight, self.futures))))
        self.passes = 1

    def stats(self, C):
        self.passes += 1
        parts = self.client.gather(self.client.map(_point_stats, self.futures, C=np.asarray(C, float), pure=False))
        key = tuple(p[0] for p in parts)
        far = max((p[4] for p in parts), key=lambda t: t[0])[1]
        return key, sum(p[1] for p in parts), sum(p[2] for p in parts), sum(p[3] for p in parts), far

    def sample(self, seed: int) -> np.ndarray:
        size = min(self.SAMPLE, self.points.n)
        parts = self.client.gather(self.client.map(_point_sample, self.futures, [size] * len(self.futures),
                                                   [self.total] * len(self.futures), [seed] * len(self.futures),
                                                   list(range(len(self.futures))), pure=False))
        return np.vstack(parts)

    def loads(self, C, k: int):
        parts = self.client.gather(self.client.map(_point_loads, self.futures, C=np.asarray(C, float), pure=False))
        return sum(p[0] for p in parts), sum(p[1] for p in parts)

    def labels(self, C):
        return self.points.source.map_partitions(_partition_labels, self.points.names, np.asarray(C, float),
                                                 meta=pd.Series([], dtype=np.int64, name="centre"))
