"""The newton route of a task with several classes: Newton's method on the multinomial loss with
l2-type penalties and no rules, in numpy (no cvxpy program), then learnopt's certificate.

Objective F(theta) = sum_i a_i (logsumexp(z_i) - z_iy) + sum_j c_j w_j^2 over the flat theta of
:mod:`learnopt.problem.classes`. Its gradient is (X'(a*(P - Y))_k + 2 c w_k, sum_i a_i (p_ik - y_ik))
and its Hessian has, for classes k and l, the block [X 1]' diag(a * (p_k [k = l] - p_k p_l)) [X 1]
(plus 2 diag(c) on the coefficients): K(K+1)/2 weighted Grams of the design, one pass each.
The Hessian is singular along the shifts common to every class (the loss does not see them);
the step is the least-norm solution, which has no component there, and the point is kept on the
identified set (sum to zero) after each step. Backtracking (Armijo) line search; stops when the
Newton decrement falls to round-off (J. Nocedal and S. Wright, Numerical Optimization, 2006,
chapters 3 and 6; from memory).
"""
from __future__ import annotations

import time

import numpy as np
from scipy.special import logsumexp, softmax

from learnopt.solve.certificate import _combined_separable
from learnopt.terms.class_losses import MulticlassHinge, Multinomial, one_hot

MAX_STEPS = 100


def why_not(problem) -> str | None:
    """Why the newton route cannot take this task (None: it can)."""
    if isinstance(problem.loss, MulticlassHinge) and (not problem.penalties or plain(problem) is not None):
        return ("the multiclass hinge goes by smoothing and Newton steps only with l2 penalties and no rules "
                f"({plain(problem) or 'it has no penalty'})")
    if not isinstance(problem.loss, (Multinomial, MulticlassHinge)):
        return f"the {problem.loss.describe()} loss has no newton route"
    return None


def plain(problem) -> str | None:
    """Why Newton's steps need a small program each (rules, penalties other than l2), or None
    when they are plain linear solves."""
    if problem.requirements:
        return "the task has rules"
    combined = _combined_separable(problem.flat_penalties(), problem.flat) if problem.penalties else None
    if problem.penalties and (combined is None or np.any(combined[0] > 0)):
        return "a penalty is not of the l2 kind"
    return None


def newton(problem, *, time_limit: float | None = None, start=None, mu: float = 1.0,
           margin: bool = False) -> tuple[np.ndarray, int, float]:
    """(theta, Newton steps, seconds) for a task :func:`plain` accepts.

    ``margin=True, mu``: the multiclass hinge smoothed, mu * multinomial((z + [k != y]) / mu),
    which lies between the hinge and the hinge + mu log K (see :func:`smoothed_hinge`)."""
    t0 = time.perf_counter()
    ds = problem.dataset
    X = ds.X
    a = ds.weights / ds.weights.sum()
    y = ds.y.astype(int)
    d, c = len(problem.features), len(problem.carried)
    K = len(problem.labels)
    cols = np.array([problem.labels.index(v) for v in problem.carried])
    Y = one_hot(y, K)
    shift = (1.0 - Y) if margin else 0.0
    quad = np.zeros(d * c)
    if problem.penalties:
        quad = _combined_separable(problem.flat_penalties(), problem.flat)[1]
    size = problem.size
    theta = np.zeros(size) if start is None else np.asarray(start, float).copy()
    groups = _groups(problem)
    Xh = design(X, problem.intercept)

    def scores(th):
        return (problem.scores(X, th) + shift) / mu

    def value(Z, th):
        return float(mu * (a @ (logsumexp(Z, axis=1) - Z[np.arange(len(Z)), y])) + quad @ th[: d * c] ** 2)

    Z = scores(theta)
    F = value(Z, theta)
    steps = 0
    for steps in range(1, MAX_STEPS + 1):
        P = softmax(Z, axis=1)
        R = (P - Y)[:, cols] * a[:, None]
        g_w = np.asarray(X.T @ R).T.ravel() + 2.0 * quad * theta[: d * c]
        g = np.concatenate([g_w, R.sum(axis=0)]) if problem.intercept else g_w
        H = hessian(Xh, a / mu, P[:, cols], problem.intercept, quad, d, c)
        step = -np.linalg.lstsq(H, g, rcond=1e-13)[0]
        step = _project(step, groups)
        decrement = -float(g @ step)
        if decrement <= 1e-15 * max(1.0, abs(F)):
            break
        t = 1.0
        while True:
            trial = theta + t * step
            Zt = scores(trial)
            Ft = value(Zt, trial)
            if Ft <= F - 1e-4 * t * decrement or t < 1e-10:
                break
            t *= 0.5
        if Ft > F:
            break
        theta, Z, F = _project(trial, groups), None, Ft
        Z = scores(theta)
        if time_limit is not None and time.perf_counter() - t0 > time_limit:
            break
    return theta, steps, time.perf_counter() - t0


def smoothed_hinge(problem, certified, *, time_limit: float | None = None, start=None):
    """The multiclass hinge by smoothing: Newton's method on mu * multinomial((z + [k != y]) / mu)
    for mu = 1, 1/10, 1/100, ... each started from the last, until ``certified(theta, Q)`` (the
    certificate on the hinge itself, Q = the smoothed loss's softmax, a dual point) says stop.
    The smoothed loss is within mu log K of the hinge, so the gap falls with mu (Y. Nesterov,
    Smooth minimization of non-smooth functions, Math. Program. 103, 2005; from memory).
    Returns (theta, Q, steps, seconds, mu)."""
    t0 = time.perf_counter()
    ds = problem.dataset
    K = len(problem.labels)
    shift = 1.0 - one_hot(ds.y.astype(int), K)
    theta, steps, mu = start, 0, 1.0
    while mu > 1e-12:
        theta, k, _ = newton(problem, start=theta, mu=mu, margin=True)
        steps += k
        Q = softmax((problem.scores(ds.X, theta) + shift) / mu, axis=1)
        if certified(theta, Q) or (time_limit is not None and time.perf_counter() - t0 > time_limit):
            break
        mu /= 10.0
    return theta, Q, steps, time.perf_counter() - t0, mu


def _groups(problem):
    """Index sets whose mean is removed to stay on the identified set (sum to zero only)."""
    if problem.reference is not None:
        return []
    d, c = len(problem.features), len(problem.carried)
    out = [np.arange(j, d * c, d) for j in np.flatnonzero(problem.free_features())]
    if problem.intercept:
        out.append(np.arange(d * c, d * c + c))
    return out


def _project(v, groups):
    v = v.copy()
    for g in groups:
        v[g] -= v[g].mean()
    return v


def design(X, intercept: bool) -> np.ndarray:
    """[X 1] as one dense array (made once per solve)."""
    Xd = X.toarray() if hasattr(X, "toarray") else np.asarray(X, float)
    return np.hstack([Xd, np.ones((Xd.shape[0], 1))]) if intercept else Xd


CHUNK = 8192      # rows per block of the Hessian's one matrix product


def hessian(Xh, a, P, intercept: bool, quad, d: int, c: int) -> np.ndarray:
    """The Hessian in the flat layout (class after class, then intercepts): the Grams of every
    pair of classes from one matrix product per block of rows."""
    pairs = [(k, l) for k in range(c) for l in range(k, c)]
    p = Xh.shape[1]
    G = np.zeros((p, p * len(pairs)))
    for start in range(0, Xh.shape[0], CHUNK):
        rows = slice(start, start + CHUNK)
        Pr, ar, Xr = P[rows], a[rows], Xh[rows]
        weights = np.column_stack([ar * (Pr[:, k] * (k == l) - Pr[:, k] * Pr[:, l]) for k, l in pairs])
        G += Xr.T @ (Xr[:, :, None] * weights[:, None, :]).reshape(len(Xr), -1)
    G = G.reshape(p, p, len(pairs))
    size = d * c + c * int(intercept)
    H = np.zeros((size, size))
    for m, (k, l) in enumerate(pairs):
        block = G[:, :, m]
        for r, s_, blk in ((k, l, block), (l, k, block.T)) if k != l else ((k, k, block),):
            rw, sw = slice(r * d, (r + 1) * d), slice(s_ * d, (s_ + 1) * d)
            H[rw, sw] = blk[:d, :d]
            if intercept:
                H[d * c + r, sw] = blk[d, :d]
                H[rw, d * c + s_] = blk[:d, d]
                H[d * c + r, d * c + s_] = blk[d, d]
    H[np.arange(d * c), np.arange(d * c)] += 2.0 * quad
    return H
