"""Convex clustering (sum-of-norms clustering): every point gets its own centre, and a fusion
penalty pulls centres together until groups share one.

    minimise  0.5 sum_i ||x_i - u_i||^2 + strength * sum_(i,j) w_ij ||u_i - u_j||_2

over the pairs of a graph (all pairs, or a symmetric k-nearest-neighbour graph). Unlike
k-means this is convex: one solve, certified like every learnopt fit. With Z = D U (D: pair
differences) and dual rows V_l in the balls ||V_l|| <= strength w_l, weak duality gives

    P(U) >= D(V) = -0.5 ||D'V||^2 - <D'V, X>,     with U* = X + D'V* at the optimum,

so the certified gap is P(U) - D(V) for the dual point taken from the solver's tie duals and
clipped into the balls (learnopt's own bound, not the solver's). Clusters are read off as the
connected pairs whose centres agree within ``fuse_tol`` (relative to the data's spread).
"""
from __future__ import annotations

import time
import warnings
from dataclasses import dataclass, field

import cvxpy as cp
import numpy as np
import pandas as pd
import scipy.sparse as sp
from scipy.sparse.csgraph import connected_components

from learnopt.core.status import Status
from learnopt.core import checks as params
from learnopt.core.errors import DataError, ParameterError


@dataclass(frozen=True, eq=False)
class FusionTask:
    X: np.ndarray
    names: tuple[str, ...]
    strength: float
    pairs: np.ndarray          # m x 2 (i < j)
    w: np.ndarray              # m pair weights

    def solve(self, *, tol: float = 1e-9, gap_tol: float = 1e-7, fuse_tol: float = 1e-6) -> "FusionFit":
        return _solve(self, self.strength, tol, gap_tol, fuse_tol)

    def path(self, strengths, *, tol: float = 1e-9, gap_tol: float = 1e-7, fuse_tol: float = 1e-6) -> pd.DataFrame:
        """Clusters as the strength grows: strength, clusters, objective, gap, status (one row each)."""
        rows = []
        for lam in np.sort(np.asarray(strengths, float)):
            fit = _solve(self, float(lam), tol, gap_tol, fuse_tol)
            rows.append({"strength": float(lam), "clusters": int(fit.labels.max()), "objective": fit.objective,
                         "gap": fit.gap, "status": fit.status})
        return pd.DataFrame(rows)


def fusion(data, strength: float, pairs: str = "knn", *, neighbours: int = 5, weights=None,
           features=None) -> FusionTask:
    """Build a convex-clustering task (see the module docstring for the objective).

    pairs : "knn" (each point with its ``neighbours`` nearest, made symmetric) or "all".
    weights : None (1 per pair) or ("gaussian", phi) for w_ij = exp(-phi ||x_i - x_j||^2).
    """
    params.check("fusion", strength=(strength, params.NONNEGATIVE), neighbours=(neighbours, params.Interval(1, None)))
    if isinstance(data, pd.DataFrame):
        cols = list(features) if features is not None else [c for c in data.columns
                                                            if pd.api.types.is_numeric_dtype(data[c])]
        X = data[cols].to_numpy(dtype=float)
        names = tuple(str(c) for c in cols)
    else:
        X = np.asarray(data, dtype=float)
        if X.ndim == 1:
            X = X[:, None]
        names = tuple(features) if features is not None else tuple(f"x{j}" for j in range(X.shape[1]))
    if X.ndim != 2 or len(X) < 2 or not np.all(np.isfinite(X)):
        raise DataError("fusion: give at least two points with finite coordinates (rows x coordinates).")
    n = len(X)
    if pairs == "all":
        i, j = np.triu_indices(n, 1)
    elif pairs == "knn":
        d2 = np.sum((X[:, None, :] - X[None, :, :]) ** 2, axis=2) if n <= 4000 else None
        if d2 is None:
            raise ParameterError("fusion with pairs='knn' builds the distance table in memory: use at most 4000 points.")
        np.fill_diagonal(d2, np.inf)
        nn = np.argsort(d2, axis=1)[:, : min(neighbours, n - 1)]
        edges = {(min(a, b), max(a, b)) for a in range(n) for b in nn[a]}
        i, j = (np.array(v) for v in zip(*sorted(edges)))
    else:
        raise params.refusal("fusion", "pairs", pairs, params.OneOf(("knn", "all")).describe())
    if weights is None:
        w = np.ones(len(i))
    elif isinstance(weights, tuple) and len(weights) == 2 and weights[0] == "gaussian" \
            and params.NONNEGATIVE.demand(weights[1]) is None:
        w = np.exp(-float(weights[1]) * np.sum((X[i] - X[j]) ** 2, axis=1))
    else:
        raise params.refusal("fusion", "weights", weights, "None or ('gaussian', phi) with a finite number "
                                                           "phi at least 0")
    return FusionTask(X, names, float(strength), np.column_stack([i, j]), w)


def _solve(task, lam, tol, gap_tol, fuse_tol) -> "FusionFit":
    t0 = time.perf_counter()
    X, P, w = task.X, task.pairs, task.w
    n, d = X.shape
    m = len(P)
    D = sp.csr_matrix((np.r_[np.ones(m), -np.ones(m)], (np.r_[np.arange(m), np.arange(m)], np.r_[P[:, 0], P[:, 1]])),
                      shape=(m, n))
    U = cp.Variable((n, d))
    Z = cp.Variable((m, d))
    tie = Z == D @ U
    objective = 0.5 * cp.sum_squares(X - U) + lam * (w @ cp.norm(Z, 2, axis=1))
    prob = cp.Problem(cp.Minimize(objective), [tie])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        prob.solve(solver="CLARABEL", tol_gap_abs=tol, tol_gap_rel=tol, tol_feas=tol)
    if U.value is None:
        raise DataError(f"fusion: the solver returned no point ({prob.status}).")
    Uv = np.asarray(U.value, float)
    Zv = D @ Uv
    primal = float(0.5 * np.sum((X - Uv) ** 2) + lam * w @ np.linalg.norm(Zv, axis=1))
    dual = -np.inf
    raw = np.asarray(tie.dual_value, float) if tie.dual_value is not None else np.zeros((m, d))
    for V in (raw, -raw):
        norms = np.linalg.norm(V, axis=1)
        cap = lam * w
        V = V * np.minimum(1.0, cap / np.maximum(norms, 1e-300))[:, None]   # into the balls
        DtV = D.T @ V
        dual = max(dual, float(-0.5 * np.sum(DtV ** 2) - np.sum(DtV * X)))
    gap = max(primal - dual, 0.0)
    rel = gap / max(1.0, abs(primal))
    spread = float(np.max(np.ptp(X, axis=0))) or 1.0
    close = np.linalg.norm(Zv, axis=1) <= fuse_tol * spread
    graph = sp.csr_matrix((np.ones(int(close.sum())), (P[close, 0], P[close, 1])), shape=(n, n))
    _, comp = connected_components(graph, directed=False)
    # number the clusters by first appearance, from 1
    order = {c: k + 1 for k, c in enumerate(dict.fromkeys(comp.tolist()))}
    labels = np.array([order[c] for c in comp])
    status = Status.OPTIMAL if rel <= gap_tol else Status.UNVERIFIED
    msg = (f"certified: relative gap {rel:.2g} <= {gap_tol:g}" if status == Status.OPTIMAL else
           f"the certificate does not confirm optimality: relative gap {rel:.3g} > {gap_tol:g}; try a tighter tol")
    return FusionFit(status, msg, primal, gap, rel, pd.DataFrame(Uv, columns=list(task.names)), labels,
                     float(lam), time.perf_counter() - t0, task)


@dataclass
class FusionFit:
    """status ("optimal" only when the certified gap passes), objective, gap, rel_gap, centres
    (one fused centre per point), labels (cluster number per point, from 1), strength, seconds."""

    status: str
    message: str
    objective: float
    gap: float
    rel_gap: float
    centres: pd.DataFrame
    labels: np.ndarray
    strength: float
    seconds: float
    task: FusionTask = field(repr=False)

    @property
    def clusters(self) -> int:
        return int(self.labels.max())
