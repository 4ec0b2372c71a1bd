"""The optimality certificate, computed by learnopt itself from its own conjugates.

Task (theta = coefficients w and intercept b; z = M theta - q is the loss argument per row):

    P(theta) = sum_i a_i f(z_i) + R(w)   subject to the requirements.

Weak duality gives, for any u_i in dom f*, multipliers mu >= 0 for "<=" rows, any nu for
"==" rows and lambda >= 0 for norm rules (with v in the dual-norm unit ball),

    P(theta) >= D = -sum_i a_i f*(u_i) - (a*u).q - mu.rhs - nu.rhs + lambda (v.c - bound)
                   + inf_theta [ g.theta + R(w) ],     g = M'(a*u) + A'mu + A'nu + lambda (A'v + f)

for every feasible theta, so P(theta_hat) - D bounds the suboptimality of theta_hat.
The infimum is finite only when g vanishes along every direction where R is constant (the
intercept, unpenalised coefficients); learnopt makes it vanish exactly by a least-norm
correction of u on the rows where u is inside dom f*, then scales the whole dual point by
s in (0, 1] until -g_w lies in dom R* (the usual rescaling for l1-type penalties), and
evaluates inf = -R*(-g_w) in closed form (a small exact solve for mixtures of penalties).
"""
from __future__ import annotations

from dataclasses import dataclass

import cvxpy as cp
import numpy as np
import scipy.linalg as sla

from learnopt.terms.penalties import CustomPenalty, Separable, separable_conjugate, separable_shrink
from learnopt.problem.algebra import loss_argument, row_loss
from learnopt.rules.requirements import Requirement
from learnopt.solve.small import kink_rows, solve_small
from learnopt.solve.rule_duals import KINKS, feasibility, fitted_rule_terms, requirement_terms



@dataclass(frozen=True)
class Certificate:
    """Primal value, dual bound and the gap between them, all in objective units."""

    primal: float
    dual: float
    gap: float
    rel_gap: float
    violation: float        # worst absolute requirement violation at the returned point
    rel_violation: float    # the same, relative to the size of each requirement's numbers
    stationarity: float     # size of the stationarity residual before the dual point was repaired
    note: str = ""
    complementarity: float = 0.0  # largest |multiplier x slack| over the rules (KKT residual)

    def rebased(self, primal: float, dual: float | None = None) -> "Certificate":
        """The same certificate with the primal value recomputed elsewhere (and the dual bound
        shifted, when given): the gap follows from the two."""
        from dataclasses import replace
        dual = self.dual if dual is None else dual
        gap = max(primal - dual, 0.0) if np.isfinite(dual) else np.inf
        return replace(self, primal=primal, dual=dual, gap=gap,
                       rel_gap=gap / max(1.0, abs(primal)) if np.isfinite(gap) else np.inf)

    def passes(self, gap_tol: float, feas_tol: float) -> bool:
        return bool(np.isfinite(self.gap) and self.rel_gap <= gap_tol and self.rel_violation <= feas_tol)


def null_space(penalties, names, d: int, intercept: bool) -> np.ndarray:
    """Orthonormal basis of directions in theta where the penalty sum is constant."""
    basis = np.eye(d)
    combined = _combined_separable(penalties, names)
    if combined is not None:     # separable: exactly the unpenalised coordinates
        basis = basis[:, (combined[0] == 0) & (combined[1] == 0)]
        penalties = ()
    for pen in penalties:
        n_k = pen.null_space(names)
        if basis.shape[1] == 0:
            break
        # intersect span(basis) with span(n_k)
        proj = n_k @ n_k.T if n_k.shape[1] else np.zeros((d, d))
        resid = basis - proj @ basis
        coef = sla.null_space(resid) if resid.size else np.zeros((basis.shape[1], 0))
        basis = basis @ coef
        if basis.shape[1]:
            basis, _ = np.linalg.qr(basis)
    p = d + int(intercept)
    N = np.zeros((p, basis.shape[1] + int(intercept)))
    N[:d, :basis.shape[1]] = basis
    if intercept:
        N[d, -1] = 1.0
    return N


def inf_penalty(g_w, penalties, names) -> tuple[float, float]:
    """(s, inf_w s*g_w.w + R(w)) with the shrink factor s that makes it finite."""
    if not penalties:
        return 1.0, 0.0 if np.allclose(g_w, 0.0, atol=0.0) else -np.inf
    combined = _combined_separable(penalties, names)
    if combined is not None:
        a, c = combined
        s = separable_shrink(-g_w, a, c)
        return s, -separable_conjugate(-s * g_w, a, c)
    if len(penalties) == 1 and not isinstance(penalties[0], CustomPenalty):
        pen = penalties[0]
        s = pen.shrink(-g_w, names)
        return s, -pen.conjugate(-s * g_w, names)
    # a mixture: R* is the infimal convolution of the parts' conjugates. Find the largest
    # s <= 1 with -s g in dom R* = sum of the parts' domains, then the best split of -s g.
    parts = [p.conjugate_expr(cp.Variable(len(g_w)), names) for p in penalties]
    if any(part is None for part in parts):
        return _inf_by_primal_solve(g_w, penalties, names)
    d = len(g_w)
    vs = [cp.Variable(d) for _ in penalties]
    cons, conj = [], 0
    for pen, v in zip(penalties, vs):
        expr, c = pen.conjugate_expr(v, names)
        cons += c
        conj = conj + expr
    s = cp.Variable()
    feas = cp.Problem(cp.Maximize(s), cons + [sum(vs) == -s * g_w, s <= 1, s >= 0])
    # the solver only proposes s and a split; validity is checked here on the numbers themselves
    if not solve_small(feas, 1e-10) or s.value is None or s.value <= 0:
        return 1.0, -np.inf
    s_val = float(min(1.0, s.value * (1 - 1e-7)))
    split = cp.Problem(cp.Minimize(conj), cons + [sum(vs) == -s_val * g_w])
    if not solve_small(split, 1e-10) or any(v.value is None for v in vs):
        return s_val, -np.inf
    return _checked_split(vs, cons, conj, g_w, s_val)


def _checked_split(vs, cons, conj, g_w, s_val):
    """(s, -R*(-s g)) from a split the solver proposed, made exact: the sum is restored exactly
    (the residual moved into the first part), then the whole split and s are scaled down by
    1e-6 steps until every part's conjugate constraint holds with no violation at all. Any
    split that holds gives a valid (possibly weaker) bound."""
    values = [np.asarray(v.value, float).copy() for v in vs]
    values[0] = -s_val * g_w - sum(values[1:])
    # round-off left in a part's own equalities (coordinates a part does not act on) is kept
    # below 1e-11 of the gradient's size: its effect on the bound is of that order times |w|
    slack = 1e-11 * (1.0 + float(np.max(np.abs(g_w), initial=0.0)))
    for factor in (1.0, 1 - 1e-6, 1 - 1e-5, 1 - 1e-4):
        for v, value in zip(vs, values):
            v.value = factor * value
        if all(float(np.max(np.atleast_1d(c.violation()), initial=0.0)) <= slack for c in cons):
            inner = conj.value if not isinstance(conj, (int, float)) else conj
            if inner is not None and np.isfinite(float(inner)):
                return factor * s_val, -float(inner)
    return s_val, -np.inf


def _inf_by_primal_solve(g_w, penalties, names):
    """inf_w g.w + R(w) by one small solve (custom penalties have no conjugate)."""
    w = cp.Variable(len(g_w))
    prob = cp.Problem(cp.Minimize(g_w @ w + sum(p.expr(w, names) for p in penalties)))
    if not _exact_small(prob):
        return 1.0, -np.inf
    return 1.0, float(prob.value)


def _combined_separable(penalties, names):
    """(a, c) of sum_j a_j|w_j| + c_j w_j^2 when every penalty is separable, else None."""
    if not penalties or not all(isinstance(pen, Separable) for pen in penalties):
        return None
    parts = [pen.separable(names) for pen in penalties]
    return sum(a for a, _ in parts), sum(c for _, c in parts)


def _active_targets(w, penalties, names, p, threshold):
    """Rows e_j' with targets -R'_j(w_j) for coefficients away from zero (separable penalties only)."""
    combined = _combined_separable(penalties, names)
    if combined is None:
        return None
    a, c = combined
    scale = threshold * (1.0 + np.abs(w).max(initial=0.0))
    idx = np.flatnonzero((np.abs(w) > scale) & ((a > 0) | (c > 0)))
    if idx.size == 0:
        return None
    T = np.zeros((idx.size, p))
    T[np.arange(idx.size), idx] = 1.0
    return T, -(a[idx] * np.sign(w[idx]) + 2.0 * c[idx] * w[idx])


def _joint(requirements, multipliers, theta, start, T, t, kink, M, a, z, loss, low, high, tol: float = 1e-6):
    """Norm rules' multipliers and the loss's dual values on rows at a loss kink, fitted
    together (see learnopt.solve.rule_duals.fitted_rule_terms); None when there are too many
    such rows for a small dense solve."""
    found = kink_rows(loss, z, a, tol)
    if found is None or found[0].size > 2000:
        return None
    rows = found[0]
    K_u = T @ (np.asarray(M[rows].T @ np.eye(rows.size)) * a[rows])
    g_rest = M.T @ (a * start)
    fitted = fitted_rule_terms(requirements, multipliers, theta, g_rest, T, t, kink,
                               loss_rows=(K_u, start[rows], low, high))
    if fitted is None:
        return None
    g_req, const_req, du = fitted
    u = start.copy()
    u[rows] = np.clip(u[rows] + du, low, high)
    return (g_req, const_req), u


def _kink_start(loss, z, low, high, tol: float = 1e-6):
    """For a piecewise-linear loss, the dual point the primal point implies: the loss slope on
    rows away from a kink, the middle of the subgradient interval on rows at a kink (where the
    repair may then move it). None for losses without kinks."""
    if loss.kinks() is None:
        return None
    u = np.asarray(loss.gradient(z), float)
    found = kink_rows(loss, z, np.ones_like(z), tol)
    if found is not None:
        rows, left, right = found
        u[rows] = 0.5 * (left + right)
    return np.clip(u, low, high)


def _repair(u, T, t, M, a, gradient, low, high, rounds: int = 5):
    """Least-change correction of u (inside dom f*) so that T g(u) = t.

    Each row moves in proportion to its room inside dom f*, so rows at the edge of the domain
    (hinge rows outside the margin, say) stay where they are.
    """
    target = 1e-14 * (1.0 + np.abs(t).max(initial=0.0))
    full = None                                   # M T' on every row, computed at most once
    for _ in range(rounds):
        resid = T @ gradient(u) - t
        if np.abs(resid).max(initial=0.0) <= target:
            break
        room = np.minimum(u - low, high - u)
        room = np.where(np.isfinite(room), np.minimum(room, 1.0 + np.abs(u)), 1.0 + np.abs(u))
        rows = np.flatnonzero((room > 0) & (a > 0))
        if rows.size == 0:
            break
        if full is None and rows.size > len(u) // 2:
            full = np.asarray(M @ T.T)
        MT = full[rows] if full is not None else np.asarray(M[rows] @ T.T)    # |rows| x k
        K = (MT * a[rows][:, None]).T                                          # k x |rows|
        h = room[rows]
        lam, *_ = np.linalg.lstsq((K * h) @ K.T, -resid, rcond=None)
        u = u.copy()
        u[rows] = np.clip(u[rows] + h * (K.T @ lam), _on(low, rows), _on(high, rows))
    return u


def _on(bound, rows):
    """A dual-domain end on some rows (the ends are numbers, or one per row for losses that
    hold each row's target)."""
    return bound[rows] if np.ndim(bound) else bound


def repair_targets(theta, penalties, names, N):
    """The systems T g = t a dual point is repaired to meet, one per distinct reading of which
    coefficients are active: the free directions (N' g = 0), plus g_j = -R'_j(w_j) on the
    coordinates read as active at thresholds 1e-9 and 1e-6 (and none)."""
    d, seen = len(names), set()
    for threshold in (1e-9, 1e-6, None):
        active = None if threshold is None else _active_targets(theta[:d], penalties, names, len(theta), threshold)
        key = None if active is None else tuple(np.flatnonzero(active[0].any(axis=0)))
        if key in seen:
            continue
        seen.add(key)
        T, t = N.T, np.zeros(N.shape[1])
        if active is not None:
            T, t = np.vstack([T, active[0]]), np.concatenate([t, active[1]])
        yield T, t


def no_conjugate(loss, primal, violation, rel_violation, comp) -> Certificate | None:
    """The certificate of a loss without a conjugate (no dual bound), or None when it has one."""
    try:
        loss.conjugate(np.zeros(1))
    except NotImplementedError:
        return Certificate(primal, -np.inf, np.inf, np.inf, violation, rel_violation, np.nan,
                           f"the loss {loss.describe()} has no conjugate, so no dual bound can be "
                           f"computed; give custom(..., conjugate=...) to certify it", comp)
    return None


def certify(*, M, q, a, loss, penalties, names, requirements: list[Requirement], theta, u,
            multipliers, intercept: bool, enough: float = 0.0) -> Certificate:
    """Certificate for the point ``theta`` with dual point ``u`` and requirement multipliers.

    ``enough``: stop trying further readings of the active set once the relative gap is this small.
    """
    theta = np.asarray(theta, float)
    d = len(names)
    w = theta[:d]
    z = M @ theta - q
    if u is None:
        u = loss.gradient(z)
    primal = float(a @ loss.value(z) + sum(p.value(w, names) for p in penalties))
    violation, rel_violation, comp = feasibility(requirements, multipliers, theta)
    missing = no_conjugate(loss, primal, violation, rel_violation, comp)
    if missing is not None:
        return missing

    low, high = loss.dual_domain()
    u = np.clip(np.asarray(u, float), low, high)

    closed = requirement_terms(requirements, multipliers, theta)   # the rules' terms, closed form
    g_loss = M.T @ (a * u)

    recent: list = []       # the last few (u, terms, g(u)): the repair and the bound ask for the same ones

    def gradient(uu, terms=closed):
        for seen_u, seen_terms, seen_g in recent:
            if seen_u is uu and seen_terms is terms:
                return seen_g
        out = (g_loss if uu is u else M.T @ (a * uu)) + terms[0]
        recent[:] = [(uu, terms, out)] + recent[:2]
        return out

    N = null_space(penalties, names, d, intercept)
    g = gradient(u)
    stationarity = float(np.linalg.norm(N.T @ g)) if N.shape[1] else 0.0
    note = ""
    base_scale = np.abs(closed[0]).max(initial=0.0) + 1.0
    scale_g = []        # the size of the terms summed in g, computed only when needed

    def free_ok(gg):
        """Is g zero along the free directions, up to round-off in the terms that make it?"""
        if not N.shape[1]:
            return True
        resid = np.linalg.norm(N.T @ gg, np.inf)
        if resid <= 1e-11 * base_scale:
            return True
        if not scale_g:
            scale_g.append(float(np.abs(M.T @ (a * np.abs(u))).max(initial=0.0)) + base_scale)
        return resid <= 1e-11 * scale_g[0]

    def bound(uu, terms=closed) -> float:
        """The dual value at uu (any uu in dom f* with exact stationarity on N gives a valid bound)."""
        g = gradient(uu, terms)
        if not free_ok(g):
            return -np.inf
        drop = 0.0
        if N.shape[1]:
            left = N @ (N.T @ g)       # what is left along the free directions is round-off; its
            g = g - left               # share of the Lagrangian at the point is charged to the bound
            drop = abs(float(left @ theta))
        s, inner_val = inf_penalty(g[:d], penalties, names)
        su = s * uu
        value = float(-a @ loss.conjugate(su) - (a * su) @ q + s * terms[1] + inner_val) - drop
        return value if np.isfinite(value) else -np.inf

    # The dual point must meet T g = t exactly: free directions (T = N', t = 0) or the bound is
    # -inf. Asking also that active separable coordinates have g_j = -R'_j(w_j) keeps the bound
    # tight without rescaling, but which coordinates are active is a judgement on a numerical
    # point, so a few readings are tried and the best (largest) valid bound is kept. For each
    # reading, the rules' terms are the closed form and, when a norm rule is tight, the terms
    # with its multiplier vector fitted to the reading (see learnopt.solve.rule_duals).
    readings, dual = [], -np.inf
    starts = [u]                                   # the route's dual point, and for piecewise-linear
    kinked = _kink_start(loss, z, low, high)       # losses one rebuilt from the point's own rows
    if kinked is not None:
        starts.append(kinked)
    kinks = (None,) + (KINKS if any(r.sense == "norm" for r in requirements) else ())

    def repaired(start, T, t, terms):
        return _repair(start, T, t, M, a, lambda v: gradient(v, terms), low, high) if T.shape[0] else start

    def combinations():          # lazily: the first readings are usually enough
        for T, t in repair_targets(theta, penalties, names, N):
            for start in starts:
                for kink in kinks:
                    yield T, t, start, kink

    for T, t, start, kink in combinations():
        if kink is None:
            terms = closed
        elif T.shape[0]:
            g_start = g_loss if start is u else M.T @ (a * start)
            terms = fitted_rule_terms(requirements, multipliers, theta, g_start, T, t, kink)
        else:
            continue
        if terms is None:
            continue
        uu = repaired(start, T, t, terms)
        if kink is not None and start is kinked and not free_ok(gradient(uu, terms)):
            # the rules' multipliers and the loss's dual values on the rows at a kink settle
            # each other: fit them together, then repair what round-off is left
            joint = _joint(requirements, multipliers, theta, start, T, t, kink, M, a, z, loss, low, high)
            if joint is not None:
                terms, uu = joint
                uu = repaired(uu, T, t, terms)
        readings.append((uu, terms))
        dual = max(dual, bound(uu, terms))
        if (primal - dual) <= enough * max(1.0, abs(primal)):
            break                     # tight enough: further readings cannot matter
    if not np.isfinite(dual):
        note = ("the dual point could not be made exactly stationary along the free directions "
                "(intercept and unpenalised coefficients); no finite dual bound") if N.shape[1] and \
            not any(free_ok(gradient(uu, terms)) for uu, terms in readings) else "the dual bound is not finite at this point"
        return Certificate(primal, dual, np.inf, np.inf, violation, rel_violation, stationarity, note, comp)
    gap = max(primal - dual, 0.0)
    return Certificate(primal, dual, gap, gap / max(1.0, abs(primal)), violation, rel_violation,
                       stationarity, note, comp)


def certify_point(task, theta, u, mults, enough: float = 0.0):
    """learnopt's certificate for a point of the task (whatever route produced it).

    When the route's multipliers put weight on rule rows with room to spare, the certificate is
    also read with those multipliers at zero (any non-negative multipliers give a valid bound;
    at an optimum a row with room has multiplier zero) and the better bound is kept."""
    M, q, a = loss_argument(task)
    reqs = list(task.requirements)

    def read(m):
        return certify(M=M, q=q, a=a, loss=row_loss(task), penalties=task.penalties, names=task.features,
                       requirements=reqs, theta=theta, u=u, multipliers=m, intercept=task.intercept, enough=enough)

    cert = read(mults)
    cleaned = _without_room(reqs, mults, np.asarray(theta, float))
    if cleaned is None or cert.rel_gap <= enough:
        return cert
    other = read(cleaned)
    return other if other.gap < cert.gap else cert


def _without_room(reqs, mults, theta):
    """The multipliers with rows that have room (slack above 1e-9 of the rule's scale) set to
    zero; None when nothing changes."""
    if mults is None or not reqs:
        return None
    out, changed = [], False
    for r, m in zip(reqs, mults):
        if r.sense == "==" or m is None:
            out.append(m)
            continue
        roomy = np.asarray(r.slack(theta)) > 1e-9 * r.scale()
        mm = np.array(m, dtype=float, copy=True).reshape(np.shape(m))
        if r.sense == "norm":
            if bool(np.all(roomy)) and float(np.sum(np.abs(mm))) > 0:
                mm, changed = np.zeros_like(mm), True
        elif np.any(mm[roomy] != 0):
            mm[roomy], changed = 0.0, True
        out.append(mm)
    return out if changed else None


def _exact_small(prob) -> bool:
    """The penalty parts' small programs: Clarabel at 1e-10, an exact optimum only."""
    return solve_small(prob, 1e-10, accept_inaccurate=False)
