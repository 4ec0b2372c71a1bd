"""Points for constrained centres: which columns are coordinates, and the nearest-centre kernel
every assignment step uses (in memory and on each partition)."""
from __future__ import annotations

import numpy as np
import pandas as pd

from learnopt.core.errors import DataError

CHUNK = 65536          # rows per block in the assignment step


def coordinate_columns(frame: pd.DataFrame, features, weights: str | None) -> list:
    """The coordinate columns: ``features``, or every numeric column but the weights; checked
    against ``frame`` (the data, or only its column types for sharded data)."""
    cols = list(features) if features is not None else [c for c in frame.columns
                                                         if c != weights and pd.api.types.is_numeric_dtype(frame[c])]
    missing = [c for c in cols if c not in frame.columns]
    if missing:
        raise DataError(f"centres: no column(s) {missing}; the data has {list(frame.columns)}.")
    bad = [c for c in cols if not pd.api.types.is_numeric_dtype(frame[c])]
    if bad:
        raise DataError(f"centres: column(s) {bad} are not numeric; centres need numeric coordinates.")
    return cols


def assign(X: np.ndarray, C: np.ndarray, xx: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    """Nearest centre and squared distance per point (chunked: memory O(CHUNK x k)).

    ``xx``: the points' squared norms, when the caller keeps them between calls.
    """
    labels = np.empty(len(X), dtype=int)
    d2 = np.empty(len(X))
    half = 0.5 * np.einsum("ij,ij->i", C, C)
    xx = np.einsum("ij,ij->i", X, X) if xx is None else xx
    for start in range(0, len(X), CHUNK):
        block = X[start:start + CHUNK]
        score = block @ C.T
        score -= half                     # argmax of x.c - |c|^2/2 is the nearest centre
        lab = np.argmax(score, axis=1)
        labels[start:start + CHUNK] = lab
        best = np.take_along_axis(score, lab[:, None], axis=1)[:, 0]
        d2[start:start + CHUNK] = np.maximum(xx[start:start + CHUNK] - 2.0 * best, 0.0)
    return labels, d2
