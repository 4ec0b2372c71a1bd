"""What the sharded route sends to the row blocks (module-level functions: dask pickles them by
reference) and the certificate computed by passes over them.

Each function takes one block (X, y, w) and returns a small result the client adds up; the
certificate is learnopt's usual one with every row sum done by a pass (the repair's p x p
system is M' diag(a^2 h) M, summed).
"""
from __future__ import annotations

import warnings

import cvxpy as cp
import numpy as np

from learnopt.problem.algebra import Design, requirement_constraint
from learnopt.scale.blocks import Blocks, add_up
from learnopt.solve.routes import newton
from learnopt.solve.routes.base import read_multipliers
from learnopt.solve.certificate import Certificate, inf_penalty, no_conjugate, null_space, repair_targets
from learnopt.solve.rule_duals import feasibility, requirement_terms


def _rows(block, argument: str, intercept: bool, W: float):
    """(M, q, a) of one block, a = w / W with W the weight total over every block; ``argument``
    is the loss's (residual, margin, or linear: then the loss holds the targets, see _bound)."""
    X, y, w = block
    M = Design(X, intercept, y if argument == "margin" else None)
    return M, (y if argument == "residual" else np.zeros(len(y))), w / W


def _bound(block, loss):
    """The loss on this block's rows (the targets bound when the loss needs them)."""
    return loss.given(block[1])


def outside_support(block, loss):
    """How many of this block's targets the loss cannot fit, and the first of them (block rows)."""
    bad = np.flatnonzero(loss.outside_support(block[1]))
    return bad.size, bad[:5].tolist()


def _weight_sum(block):
    return float(block[2].sum()), len(block[2])


def _moments(block, intercept: bool, W: float):
    """(G, c, y'Ay): this block's part of the Gram moments."""
    X, y, w = block
    a = w / W
    G = newton._weighted_gram(Design(X, intercept), a)
    c = np.asarray(X.T @ (a * y)).ravel()
    if intercept:
        c = np.append(c, a @ y)
    return G, c, float(a @ (y * y))


def _tsqr_block(block, intercept: bool, W: float):
    """R of the QR factorisation of sqrt(a) [X 1 y] on this block (the first TSQR level)."""
    X, y, w = block
    cols = [X] + ([np.ones((len(y), 1))] if intercept else []) + [y[:, None]]
    return np.linalg.qr(np.hstack(cols) * np.sqrt(w / W)[:, None], mode="r")


def _loss_sum(block, theta, loss, argument, intercept, W):
    loss = _bound(block, loss)
    M, q, a = _rows(block, argument, intercept, W)
    return float(a @ loss.value(M @ theta - q)) if len(a) else 0.0


def _trace(block, argument, intercept, W):
    M, _, a = _rows(block, argument, intercept, W)
    return newton._weighted_trace(M, a)


def _model(block, theta, loss, argument, intercept, W):
    """This block's part of (gradient, Hessian) of the mean loss at theta."""
    loss = _bound(block, loss)
    M, q, a = _rows(block, argument, intercept, W)
    z = M @ theta - q
    return M.T @ (a * loss.gradient(z)), newton._weighted_gram(M, a * loss.curvature(z))


def squared_gram(block, loss, argument, intercept, W):
    """This block's part of M' A M (the squared loss's curvature)."""
    M, _, a = _rows(block, argument, intercept, W)
    return newton._weighted_gram(M, a)


def _room(u, a, low, high):
    """How far each row's dual value may move (the in-memory certificate's repair weights)."""
    room = np.minimum(u - low, high - u)
    room = np.where(np.isfinite(room), np.minimum(room, 1.0 + np.abs(u)), 1.0 + np.abs(u))
    return np.where((room > 0) & (a > 0), room, 0.0)


def _dual_sums(M, q, a, u, h, loss):
    """(g = M'(a u), M'(a |u|), Q = M' diag(a^2 h) M, a.f*(u), (a u).q) for one block."""
    with np.errstate(invalid="ignore"):
        conj = float(a @ loss.conjugate(u)) if len(a) else 0.0
    return (M.T @ (a * u), M.T @ (a * np.abs(u)), newton._weighted_gram(M, a * a * h), conj, float((a * u) @ q))


def _cert_start(block, u, theta, loss, argument, intercept, W):
    """((u, h) kept on the worker, (loss sum, dual sums...)) at theta; u: the block's dual point
    from the route, or None for the loss gradient."""
    loss = _bound(block, loss)
    M, q, a = _rows(block, argument, intercept, W)
    z = M @ theta - q
    low, high = loss.dual_domain()
    u = np.clip(loss.gradient(z) if u is None else u, low, high)
    h = _room(u, a, low, high)
    return (u, h), (float(a @ loss.value(z)) if len(a) else 0.0, *_dual_sums(M, q, a, u, h, loss))


def _cert_step(block, state, v, loss, argument, intercept, W):
    """One repair round: u <- clip(u + h a (M v)), and the sums at the new u."""
    loss = _bound(block, loss)
    M, q, a = _rows(block, argument, intercept, W)
    u, h = state
    low, high = loss.dual_domain()
    u = np.clip(u + h * a * (M @ v), low, high)
    h = _room(u, a, low, high)
    return (u, h), _dual_sums(M, q, a, u, h, loss)


def _cert_scaled(block, state, s, loss, argument, intercept, W):
    """a.f*(s u) and (a s u).q for the shrunk dual point."""
    loss = _bound(block, loss)
    M, q, a = _rows(block, argument, intercept, W)
    su = s * state[0]
    return (float(a @ loss.conjugate(su)) if len(a) else 0.0), float((a * su) @ q)


def _local(block, key, state, dvec, rows, c, loss, argument, intercept, W, settings):
    """One block's ADMM step: argmin sum_i a_i f(m_i x - q_i) + 1/2 |c x - dvec|^2 (c = sqrt(rho),
    dvec = c (z - u)) subject to the block's rules row by row (``rows``: one list of requirements
    per rule); returns (x, u rows, multipliers of those rules). The compiled problem is kept per
    worker process."""
    cache = _LOCAL_PROBLEMS
    entry = cache.get(key)
    flat = [r for group in (rows or []) for r in group]
    if entry is None:
        M, q, a = _rows(block, argument, intercept, W)
        p = M.shape[1]
        x = cp.Variable(p)
        zr = cp.Variable(len(a))
        cpar = cp.Parameter(nonneg=True)
        dpar = cp.Parameter(p)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            tie = zr == M.explicit() @ x - q
            pairs = [(r, requirement_constraint(r, x)) for r in flat]
            prob = cp.Problem(cp.Minimize(loss.mean_expr(zr, a) + 0.5 * cp.sum_squares(cpar * x - dpar)),
                              [tie] + [con for _, con in pairs])
        for other in [k for k in cache if k[0] != key[0]]:
            del cache[other]                    # problems of earlier fits (each holds its rows)
        entry = cache[key] = (prob, x, tie, cpar, dpar, a, pairs)
    prob, x, tie, cpar, dpar, a, pairs = entry
    cpar.value, dpar.value = float(c), np.asarray(dvec, float)
    start = None if state is None else state[0]
    if start is not None:
        x.value = start
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        prob.solve(**settings)
    if x.value is None:
        raise cp.error.SolverError(f"the block step ended with status {prob.status}")
    nu = np.asarray(tie.dual_value, float).ravel()
    with np.errstate(divide="ignore", invalid="ignore"):
        u = np.where(a > 0, -nu / a, 0.0)
    return np.asarray(x.value, float).copy(), u, read_multipliers(pairs)


def _row_count(rows):
    return [sum(r.rows for r in group) for group in rows]


def _combine_rows(parts):
    """Add up the blocks' :func:`_row_terms` (sums, worst cases, any binding)."""
    g, const, viol, rel_viol, comp, prices, binding = parts[0]
    for p in parts[1:]:
        g, const, prices = g + p[0], const + p[1], prices + p[5]
        viol, rel_viol, comp = max(viol, p[2]), max(rel_viol, p[3]), max(comp, p[4])
        binding = np.maximum(binding, p[6])
    return g, const, viol, rel_viol, comp, prices, binding


def _row_terms(rows, mults, theta, feas_tol):
    """The rules row by row at theta on one block: (their part of the Lagrangian's gradient and
    constant, worst violation, worst relative violation, complementarity, price per rule,
    binding per rule)."""
    flat = [r for group in rows for r in group]
    g, const = requirement_terms(flat, mults, theta)
    viol, rel_viol, comp = feasibility(flat, mults, theta)
    prices, binding, k = [], [], 0
    for group in rows:
        price, bind = 0.0, False
        for r in group:
            m = np.asarray(mults[k], float)
            price += float(np.sum(np.maximum(m, 0.0) if r.sense == "<=" else m))
            bind = bind or (r.sense == "==" or bool(np.min(r.slack(theta), initial=np.inf) <= feas_tol * r.scale()))
            k += 1
        prices.append(price)
        binding.append(bind)
    return g, const, viol, rel_viol, comp, np.array(prices), np.array(binding, dtype=float)


_LOCAL_PROBLEMS: dict = {}


# ---- the certificate by passes

def certify_sharded(blocks: Blocks, task, theta, multipliers, common: dict, u_blocks=None,
                    enough: float = 0.0, row_terms=None) -> Certificate:
    """learnopt's certificate (see :mod:`learnopt.solve.certificate`) with every row sum done on the blocks.

    ``row_terms``: the summed :func:`_row_terms` of the rules row by row at theta, if any.
    """
    loss, names, penalties = task.loss, task.features, task.penalties
    requirements = list(task.requirements)
    theta = np.asarray(theta, float)
    d = len(names)
    violation, rel_violation, comp = feasibility(requirements, multipliers, theta)
    if row_terms is not None:
        violation, rel_violation, comp = (max(violation, row_terms[2]), max(rel_violation, row_terms[3]),
                                          max(comp, row_terms[4]))
    pen = float(sum(p.value(theta[:d], names) for p in penalties))
    results = blocks.map(_cert_start, u_blocks or [None] * len(blocks), theta=theta, **common)
    states = blocks.pick(results, 0)
    loss_sum, g0, absg, Q, conj, lin = add_up(blocks.gather(blocks.pick(results, 1)))
    del results
    primal = loss_sum + pen
    missing = no_conjugate(loss.given(np.ones(1)), primal, violation, rel_violation, comp)
    if missing is not None:
        return missing
    g_req, const_req = requirement_terms(requirements, multipliers, theta)
    if row_terms is not None:
        g_req, const_req = g_req + row_terms[0], const_req + row_terms[1]
    N = null_space(penalties, names, d, task.intercept)
    stationarity = float(np.linalg.norm(N.T @ (g0 + g_req))) if N.shape[1] else 0.0
    scale = max(np.abs(g_req).max(initial=0.0) + 1.0, float(np.abs(absg).max(initial=0.0)) + 1.0)

    def free_ok(g) -> bool:
        return not N.shape[1] or np.linalg.norm(N.T @ g, np.inf) <= 1e-11 * scale

    def bound(st, sums) -> float:
        g, _, _, conj, lin = sums
        g = g + g_req
        if not free_ok(g):
            return -np.inf
        if N.shape[1]:
            g = g - N @ (N.T @ g)
        s, inner = inf_penalty(g[:d], penalties, names)
        if s != 1.0:
            conj, lin = add_up(blocks.gather(blocks.map(_cert_scaled, st, s=s, **common)))
        value = float(-conj - lin + s * const_req + inner)
        return value if np.isfinite(value) else -np.inf

    dual = -np.inf
    for T, t in repair_targets(theta, penalties, names, N):
        st, sums = states, (g0, absg, Q, conj, lin)
        target = 1e-14 * (1.0 + np.abs(t).max(initial=0.0))
        for _ in range(5 if T.shape[0] else 0):
            resid = T @ (sums[0] + g_req) - t
            K = T @ sums[2] @ T.T
            if np.abs(resid).max(initial=0.0) <= target or not np.any(K):
                break
            lam, *_ = np.linalg.lstsq(K, -resid, rcond=None)
            out = blocks.map(_cert_step, st, v=T.T @ lam, **common)
            st, sums = blocks.pick(out, 0), add_up(blocks.gather(blocks.pick(out, 1)))
        dual = max(dual, bound(st, sums))
        if primal - dual <= enough * max(1.0, abs(primal)):
            break
    if not np.isfinite(dual):
        return Certificate(primal, dual, np.inf, np.inf, violation, rel_violation, stationarity,
                           "the dual bound is not finite at this point", comp)
    gap = max(primal - dual, 0.0)
    return Certificate(primal, dual, gap, gap / max(1.0, abs(primal)), violation, rel_violation,
                       stationarity, "", comp)
