"""Solving in a better-conditioned basis: centred and scaled columns, mapped back exactly.

When the design's columns differ wildly in scale, or sit far from zero next to an intercept
(a year column, say), every route works in the coordinates

    x'_j = (x_j - m_j) / s_j        (m_j the weighted mean when there is an intercept, else 0),

i.e. theta = T theta' with w_j = w'_j / s_j and b = b' - sum_j m_j w'_j / s_j. The task is the
same problem in the new coordinates: predictions, residuals, loss dual points and rule
multipliers are unchanged; rules become A T theta'; separable penalties move their per-feature
weights (l1 part by 1/s_j, l2 part by 1/s_j^2). Only tasks whose penalties are all separable
are rewritten (group and total-variation norms do not map to the same form).
"""
from __future__ import annotations

from dataclasses import replace

import numpy as np
import scipy.sparse as sp

from learnopt.data.table import Dataset
from learnopt.terms.penalties import Separable, l1, l2
from learnopt.rules.requirements import Requirement

SCALE_SPREAD = 1e3      # rewrite when column scales differ by more than this factor
OFFSET_RATIO = 30.0     # ... or a column's mean exceeds this many of its standard deviations


def conditioned(task):
    """(task in the better basis, T) with theta = T theta', or (task, None) when not needed."""
    ds = task.dataset
    if sp.issparse(ds.X) or ds.d == 0 or ds.n < 2:
        return task, None
    if not all(isinstance(p, Separable) for p in task.penalties):
        return task, None
    a = ds.weights / ds.weights.sum()
    mean = a @ ds.X
    # one pass, no copy of X (the cancellation in E[x^2] - mean^2 only matters far below the
    # thresholds this test uses); the data gateway keeps every column's largest value between
    # 1e-150 and 1e150 in size (or 0), so the squares neither underflow nor overflow here
    sd = np.sqrt(np.maximum(np.einsum("i,ij,ij->j", a, ds.X, ds.X) - mean ** 2, 0.0))
    live = sd > 0
    if not live.any():
        return task, None
    spread = sd[live].max() / sd[live].min()
    offset = np.max(np.abs(mean[live]) / sd[live]) if task.intercept else 0.0
    if spread <= SCALE_SPREAD and offset <= OFFSET_RATIO:
        return task, None
    s = np.where(live, sd, 1.0)
    m = np.where(live, mean, 0.0) if task.intercept else np.zeros(ds.d)
    d = ds.d
    p = d + int(task.intercept)
    T = np.zeros((p, p))
    T[:d, :d] = np.diag(1.0 / s)
    if task.intercept:
        T[d, :d] = -m / s
        T[d, d] = 1.0
    mapped = [_map_penalty(pen, s, task.features) for pen in task.penalties]
    if any(q is None for q in mapped):      # a weight beyond floating point in the new basis: keep the old one
        return task, None
    X2 = (ds.X - m) / s
    data = Dataset(X2, ds.y, ds.weights, ds.names, ds.frame, ds.encoding, ds.labels, list(ds.notes),
                   ds.offset, ds.offset_source)
    reqs = tuple(_map_rule(r, T) for r in task.requirements)
    pens = tuple(q for part in mapped for q in part)
    return replace(task, dataset=data, penalties=pens, requirements=reqs), T


def _map_rule(r: Requirement, T: np.ndarray) -> Requirement:
    if r.sense == "norm":
        return replace(r, A=r.A @ T, f=T.T @ r.f)
    return replace(r, A=r.A @ T)


def _map_penalty(pen: Separable, s: np.ndarray, names):
    """The same penalty on w' = s * w: l1 weights c/s, l2 weights c/s^2 (elastic net: both);
    None when a weight would leave floating point's range (the user never wrote these weights,
    so no error may name them)."""
    a1, c2 = pen.separable(names)           # at the penalty's strength: a1 |w| + c2 w^2 per coefficient
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        if not (np.all(np.isfinite(a1 / s)) and np.all(np.isfinite(c2 / s ** 2))
                and np.all((a1 / s > 0) == (a1 > 0)) and np.all((c2 / s ** 2 > 0) == (c2 > 0))):
            return None
    out = []
    if np.any(a1 > 0):
        out.append(l1(1.0, factors=dict(zip(names, (a1 / s).tolist()))))
    if np.any(c2 > 0):
        out.append(l2(1.0, factors=dict(zip(names, (c2 / s ** 2).tolist()))))
    return out
