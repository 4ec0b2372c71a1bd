"""The certificate of a task with several classes, from learnopt's own conjugates.

Task (theta = (w_1..w_C, b_1..b_C) over the classes carrying coefficients, z_i the K scores):

    P(theta) = sum_i a_i f(z_i; y_i) + R(w)   subject to the rules and E theta = 0 (identification).

Weak duality: for every q_i in the simplex (u_i = q_i - e_y in dom f*), multipliers mu of the
rules and any nu for E,

    P(theta) >= D = -sum_i a_i f*(u_i) - mu.rhs + inf_theta [ g.theta + R(w) ],
    g = (X'(a*U)_k, sum_i a_i u_ik)_k over the carried classes + A'mu + E'nu.

The infimum is finite only when g vanishes on the coefficients no penalty acts on (the
intercepts, unpenalised features) up to E'nu: under sum-to-zero identification nu takes each such
coefficient's mean over the classes; beside a reference class the coefficients there must vanish
outright. learnopt makes them vanish by moving the q_i inside the simplex, each row in proportion
to its own room: delta_i = (diag q_i - q_i q_i') v_i, which keeps every row summing to one and
leaves rows at a vertex where they are (the multiclass hinge's rows outside the margin). The
v_i = Lambda'x_i come from one small linear system. Then the whole dual point is scaled by
s in (0, 1] (q_i -> s q_i + (1 - s) e_y stays in the simplex) until -g_w lies in dom R*, and
inf = -R*(-s g_w) in closed form (:func:`learnopt.solve.certificate.inf_penalty`).
"""
from __future__ import annotations

import numpy as np

from learnopt.solve.certificate import Certificate, _combined_separable, inf_penalty
from learnopt.solve.rule_duals import feasibility, requirement_terms
from learnopt.terms.class_losses import one_hot

ROUND_OFF = 1e-11


class _Layout:
    """Where each entry of theta sits: its feature column (d = the intercept) and its class."""

    def __init__(self, problem, X, a):
        self.problem, self.X, self.a = problem, X, a
        self.d, self.c = len(problem.features), len(problem.carried)
        self.K = len(problem.labels)
        self.cols = np.array([problem.labels.index(v) for v in problem.carried])
        size = problem.size
        self.feature = np.concatenate([np.tile(np.arange(self.d), self.c), np.full(size - self.d * self.c, self.d)])
        self.klass = np.concatenate([np.repeat(np.arange(self.c), self.d), np.arange(size - self.d * self.c)])
        free = np.concatenate([np.tile(problem.free_features(), self.c), np.ones(size - self.d * self.c, bool)])
        self.free = np.flatnonzero(free)
        # sum to zero: each free coefficient's classes form one group whose mean E'nu absorbs
        self.groups = [] if problem.reference is not None else \
            [self.free[self.feature[self.free] == j] for j in np.unique(self.feature[self.free])]

    def gradient(self, U) -> np.ndarray:
        """g of the loss part: (X'(a*U)_k, sum_i a_i u_ik) over carried classes, class after class."""
        AU = U[:, self.cols] * self.a[:, None]
        g_w = np.asarray(self.X.T @ AU).T.ravel()
        return np.concatenate([g_w, AU.sum(axis=0)]) if self.problem.intercept else g_w

    def free_residual(self, g) -> np.ndarray:
        """g on the free coefficients less what E'nu absorbs (must be zero for a finite bound)."""
        r = np.zeros(len(g))
        r[self.free] = g[self.free]
        for grp in self.groups:
            r[grp] -= r[grp].mean()
        return r

    def column(self, j, rows=None):
        rows = slice(None) if rows is None else rows
        if j == self.d:
            n = self.X.shape[0] if isinstance(rows, slice) else len(rows)
            return np.ones(n)
        col = self.X[rows, j]
        return np.asarray(col.todense()).ravel() if hasattr(col, "todense") else np.asarray(col, float)


def _room(Q):
    """Per row the matrix diag(q) - q q' (n x K x K)."""
    return np.einsum("ik,kl->ikl", Q, np.eye(Q.shape[1])) - Q[:, :, None] * Q[:, None, :]


def _repair(Q, lay: _Layout, g_of, T, t, rounds: int = 6):
    """Move the q_i inside the simplex so that g on coordinates T meets t (free ones: only up to
    what the identification absorbs). T: indices into theta."""
    if T.size == 0:
        return Q
    for _ in range(rounds):
        g = g_of(Q)
        r = lay.free_residual(g)
        want = r[T].copy()
        others = ~np.isin(T, lay.free)
        want[others] = g[T[others]] - t[others]
        if np.abs(want).max(initial=0.0) <= 1e-15 * (1.0 + np.abs(g).max(initial=0.0)):
            break
        H = _room(Q)
        rows = np.flatnonzero((np.abs(H).reshape(len(Q), -1).max(axis=1) > 0) & (lay.a > 0))
        if rows.size == 0:
            break
        feats = np.unique(lay.feature[T])
        Xj = np.column_stack([lay.column(j, rows) for j in feats]) * 1.0
        pos = {j: i for i, j in enumerate(feats)}
        fi = np.array([pos[j] for j in lay.feature[T]])
        ki = lay.cols[lay.klass[T]]
        Hr = H[rows]
        ar = lay.a[rows]
        S = np.empty((T.size, T.size))
        by_class = {k: np.flatnonzero(ki == k) for k in np.unique(ki)}
        for k, iu in by_class.items():                 # one weighted Gram per pair of classes
            left = Xj[:, fi[iu]]
            for l, iv in by_class.items():
                S[np.ix_(iu, iv)] = (left * (ar * Hr[:, k, l])[:, None]).T @ Xj[:, fi[iv]]
        lam, *_ = np.linalg.lstsq(S, -want, rcond=None)
        V = np.zeros((rows.size, lay.K))
        np.add.at(V.T, ki, (Xj[:, fi] * lam).T)
        step = np.einsum("ikl,il->ik", Hr, V)
        Q = Q.copy()
        Q[rows] = np.clip(Q[rows] + step, 0.0, None)
        Q[rows] /= Q[rows].sum(axis=1, keepdims=True)
    return Q


def _active(theta, lay: _Layout, penalties, names, threshold):
    """(indices, targets -R'(w)) of penalised coefficients away from zero (separable penalties)."""
    combined = _combined_separable(penalties, names)
    if combined is None:
        return None
    a_, c_ = combined
    w = theta[: lay.d * lay.c]
    scale = threshold * (1.0 + np.abs(w).max(initial=0.0))
    idx = np.flatnonzero((np.abs(w) > scale) & ((a_ > 0) | (c_ > 0)))
    return idx, -(a_[idx] * np.sign(w[idx]) + 2.0 * c_[idx] * w[idx])


def certify_classes(problem, theta, Q=None, multipliers=None, *, requirements=None, enough: float = 0.0) -> Certificate:
    """learnopt's certificate for ``theta`` of a :class:`~learnopt.problem.classes.ClassesProblem`.

    ``Q``: a starting dual point (n x K, rows in the simplex; default the loss's gradient plus
    e_y); ``requirements``: the rules and identification rows with their ``multipliers``."""
    ds = problem.dataset
    X, y = ds.X, ds.y.astype(int)
    a = ds.weights / ds.weights.sum()
    theta = np.asarray(theta, float)
    lay = _Layout(problem, X, a)
    reqs = list(problem.requirements if requirements is None else requirements)
    mults = [0.0 if r.sense == "norm" else np.zeros(r.rows) for r in reqs] if multipliers is None else multipliers
    Y = one_hot(y, lay.K)
    Z = problem.scores(X, theta)
    pens, names = problem.flat_penalties(), problem.flat
    w = theta[: lay.d * lay.c]
    primal = float(a @ problem.loss.value(Z, y) + sum(p.value(w, names) for p in pens))
    violation, rel_violation, comp = feasibility(reqs, mults, theta)
    g_req, const_req = requirement_terms(reqs, mults, theta)
    if Q is None:
        Q = problem.loss.gradient(Z, y) + Y
    Q = np.clip(np.asarray(Q, float), 0.0, None)
    Q /= Q.sum(axis=1, keepdims=True)

    def g_of(QQ):
        return lay.gradient(QQ - Y) + g_req

    stationarity = float(np.linalg.norm(lay.free_residual(g_of(Q))))

    def bound(QQ):
        g = g_of(QQ)
        r = lay.free_residual(g)
        size = 1.0 + float(np.abs(lay.gradient(np.abs(QQ - Y))).max(initial=0.0)) + np.abs(g_req).max(initial=0.0)
        if np.abs(r).max(initial=0.0) > ROUND_OFF * size:
            return -np.inf
        drop = abs(float(r @ theta))              # the round-off left is charged to the bound
        g_w = g[: lay.d * lay.c].copy()
        g_w[lay.free[lay.free < lay.d * lay.c]] = 0.0
        s, inner = inf_penalty(g_w, pens, names)
        Qs = s * QQ + (1.0 - s) * Y
        value = float(-a @ problem.loss.conjugate(Qs - Y, y) + s * const_req + inner) - drop
        return value if np.isfinite(value) else -np.inf

    readings = [(lay.free, np.zeros(lay.free.size))]
    for threshold in (1e-9, 1e-6):
        act = _active(theta, lay, pens, names, threshold)
        if act is not None and act[0].size:
            T = np.concatenate([lay.free, act[0]])
            readings.append((T, np.concatenate([np.zeros(lay.free.size), act[1]])))
    dual, best = -np.inf, Q
    for T, t in readings:
        order = np.argsort(T)
        QQ = _repair(Q, lay, g_of, T[order], t[order])
        value = bound(QQ)
        if value > dual:
            dual, best = value, QQ
        if primal - dual <= enough * max(1.0, abs(primal)):
            break
    if not np.isfinite(dual):
        note = ("the dual point could not be made exactly stationary on the coefficients no penalty acts on "
                "(intercepts, unpenalised features); no finite dual bound")
        return Certificate(primal, dual, np.inf, np.inf, violation, rel_violation, stationarity, note, comp)
    gap = max(primal - dual, 0.0)
    return Certificate(primal, dual, gap, gap / max(1.0, abs(primal)), violation, rel_violation, stationarity, "",
                       comp)
