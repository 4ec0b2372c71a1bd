"""The rules' part of the certificate: their multipliers, their terms in the Lagrangian, and
feasibility at a point.

Linear rules ``A theta <= rhs`` (or ``==``) enter the Lagrangian as ``mu.(A theta - rhs)`` with
``mu >= 0`` (free for equalities). A norm rule ``||A theta + c|| + f.theta <= b`` enters as

    mu.(A theta + c) + lam (f.theta - b),     lam >= 0,  ||mu||_* <= lam

where ``||.||_*`` is the dual norm (l1 <-> l-infinity, l2 <-> l2). This is a valid term for
*any* such (mu, lam): by the definition of the dual norm, mu.y <= ||mu||_* ||y|| <= lam ||y||,
so on every feasible theta the term is <= 0 and weak duality holds (S. Boyd and
L. Vandenberghe, Convex Optimization, 2004, section 5.1 and appendix A.1.6; from memory).

The solver reports only the scalar ``lam`` of a norm rule. Away from a kink the vector is fixed
by complementary slackness (mu.y = lam ||y||): mu = lam sign(y) for l1, mu = lam y / ||y|| for
l2. At a kink it is not: where y_j = 0 in an l1 rule, mu_j may be anything in [-lam, lam], and
at y = 0 in an l2 rule (a rule that pins coefficients, ``norm2(x, z) <= 0``) mu may be anything
with ||mu||_2 <= lam. Picking sign(0) = 0 there, as the closed form does, leaves the
stationarity condition unmet and the certificate then refuses a right answer.
:func:`fitted_rule_terms` instead chooses (mu, lam) for every tight norm rule from the rule's own
optimality conditions: the subgradient set of the norm at the point (the alignment above where
y_j != 0, the dual-norm ball where y_j = 0), by the smallest residual of the stationarity
system the certificate must meet. Any choice is a valid bound; this one makes it tight.
"""
from __future__ import annotations


import cvxpy as cp
import numpy as np

from learnopt.solve.small import solve_small

KINK = 1e-7        # |y_j| below this (relative to the rule's size) is read as a kink ...
KINKS = (KINK, 1e-4)  # ... or, for points from first-order solvers, below this: reading a small
                      # non-zero as a kink only widens mu's set, so the bound stays valid
TIGHT = 1e-6       # a norm rule whose slack is below this (relative) is read as tight


def requirement_terms(requirements, multipliers, theta) -> tuple[np.ndarray, float]:
    """The rules' part of the Lagrangian at theta: its gradient sum_k A_k' mu_k (norm rules
    through their subgradient) and its constant part, multipliers clipped to their signs."""
    g_req = np.zeros(len(theta))
    const_req = 0.0
    for r, m in zip(requirements, multipliers):
        if r.sense == "norm":
            lam = max(float(m), 0.0)
            y = r.A @ theta + r.rhs
            if r.order == 2:
                nrm = np.linalg.norm(y)
                v = y / nrm if nrm > 0 else np.zeros_like(y)
            else:
                v = np.sign(y)
            g_req += lam * (r.A.T @ v + r.f)
            const_req += lam * (v @ r.rhs - r.bound)
        else:
            m = np.asarray(m, float).ravel()
            if r.sense == "<=":
                m = np.maximum(m, 0.0)
            g_req += r.A.T @ m
            const_req -= m @ r.rhs
    return g_req, const_req


def _complementarity(requirements, multipliers, theta) -> float:
    """Largest |multiplier x slack| over inequality and norm rules (zero at an exact KKT point)."""
    worst = 0.0
    for r, m in zip(requirements, multipliers):
        if r.sense == "==":
            continue
        m = np.maximum(np.atleast_1d(np.asarray(m, float)), 0.0)
        worst = max(worst, float(np.max(np.abs(m * r.slack(theta)), initial=0.0)))
    return worst


def feasibility(requirements, multipliers, theta) -> tuple[float, float, float]:
    """(worst violation, worst relative violation, complementarity) of the rules at theta."""
    viol = [r.violation(theta) for r in requirements]
    violation = max(viol, default=0.0)
    rel_violation = max((v / r.scale() for v, r in zip(viol, requirements)), default=0.0)
    return violation, rel_violation, _complementarity(requirements, multipliers, theta)

def fitted_rule_terms(requirements, multipliers, theta, g_base, T, t, kink: float = KINK, loss_rows=None):
    """(gradient, constant) of the rules' Lagrangian terms with each tight l1 / l2 norm rule's
    (mu, lam) chosen from its optimality conditions so that T g = t holds as nearly as the
    rule allows, where g = g_base + the rules' gradient (``g_base``: the loss part). Returns
    None when no norm rule is tight (the closed form is then already right).

    The unknowns are lam and the free parts of mu (the kink coordinates of an l1 rule; all of
    mu for an l2 rule at y = 0); the aligned parts follow from lam. They enter g linearly, so
    the best choice is a least-squares solution, taken exactly (numpy) when it lies in the
    rules' sets, else from a small conic problem with those sets as constraints.

    ``loss_rows = (K, u, low, high)`` adds the loss's dual values on some rows as unknowns
    (``K``: their columns in T g, ``u``: their current values, kept in [low, high]); the two
    settle each other only when solved together. The result then has a third element: the
    change of those values.
    """
    theta = np.asarray(theta, float)
    fitted, fixed = [], []
    for r, m in zip(requirements, multipliers):
        if r.sense == "norm" and r.order in (1, 2):
            y = r.A @ theta + r.rhs
            slack = r.bound - float(np.linalg.norm(y, r.order)) - float(r.f @ theta)
            if slack <= TIGHT * r.scale():
                fitted.append((r, _pieces(r, y, kink)))
                continue
        fixed.append((r, m))
    if not fitted:
        return None
    g_fix, const_fix = requirement_terms([r for r, _ in fixed], [m for _, m in fixed], theta)
    g = g_base + g_fix
    # columns of B: for each rule, lam's direction, then one column per free mu entry
    cols, where = [], []
    for r, (aligned, free) in fitted:
        where.append(len(cols))
        cols.append(r.A.T @ aligned + r.f)
        cols.extend(r.A.T[:, free].T)
    K = T @ np.column_stack(cols)
    box = None
    if loss_rows is not None:
        K_u, u_now, low, high = loss_rows
        box = (K.shape[1], u_now, low, high)
        K = np.hstack([K, K_u])
    target = t - T @ g
    x, *_ = np.linalg.lstsq(K, target, rcond=None)
    if not _inside(x, fitted, where, box):
        x = _constrained(K, target, fitted, where, box)
        if x is None:
            return None
    g_req, const_req = g_fix, const_fix
    for (r, (aligned, free)), k in zip(fitted, where):
        lam, mu_free = float(x[k]), x[k + 1: k + 1 + free.size]
        mu = lam * aligned
        mu[free] = mu_free
        dual = float(np.linalg.norm(mu, np.inf if r.order == 1 else 2))
        lam = max(lam, dual, 0.0)                # ||mu||_* <= lam exactly, whatever the round-off
        g_req = g_req + r.A.T @ mu + lam * r.f
        const_req += float(mu @ r.rhs) - lam * r.bound
    if box is not None:
        return g_req, const_req, x[box[0]:]
    return g_req, const_req


def _pieces(r, y, kink: float):
    """(aligned, free): mu = lam * aligned on the aligned coordinates; ``free`` indexes the
    coordinates where mu is free within the dual-norm ball (the kinks)."""
    size = max(1.0, float(np.abs(y).max(initial=0.0)))
    if r.order == 1:
        at = np.abs(y) <= kink * size
        return np.where(at, 0.0, np.sign(y)), np.flatnonzero(at)
    nrm = float(np.linalg.norm(y))
    if nrm > kink * size:
        return y / nrm, np.zeros(0, dtype=int)
    return np.zeros_like(y), np.arange(y.size)


def _inside(x, fitted, where, box=None, slack: float = 1e-9) -> bool:
    """Does the least-squares solution meet lam >= 0 and ||mu_free||_* <= lam (up to round-off)?
    A rule whose lam does not move g (every coordinate free, no linear part) always does: its
    lam is taken as ||mu||_* afterwards."""
    for (r, (aligned, free)), k in zip(fitted, where):
        lam, mu = float(x[k]), x[k + 1: k + 1 + free.size]
        if not (aligned.any() or r.f.any()):
            continue
        if lam < -slack:
            return False
        if mu.size and np.linalg.norm(mu, np.inf if r.order == 1 else 2) > lam + slack * (1.0 + abs(lam)):
            return False
    if box is not None:
        start, u_now, low, high = box
        u_new = u_now + x[start:]
        if np.any(u_new < low - slack) or np.any(u_new > high + slack):
            return False
    return True


def _constrained(K, target, fitted, where, box=None):
    """The same least squares with lam >= 0 and ||mu_free||_* <= lam as constraints (and the
    loss's dual values kept inside their domain)."""
    x = cp.Variable(K.shape[1])
    cons = []
    if box is not None:
        start, u_now, low, high = box
        if np.isfinite(low):
            cons.append(u_now + x[start:] >= low)
        if np.isfinite(high):
            cons.append(u_now + x[start:] <= high)
    for (r, (_, free)), k in zip(fitted, where):
        cons.append(x[k] >= 0)
        if free.size:
            cons.append(cp.norm(x[k + 1: k + 1 + free.size], np.inf if r.order == 1 else 2) <= x[k])
    problem = cp.Problem(cp.Minimize(cp.norm(K @ x - target, 2)), cons)
    if not solve_small(problem, 1e-15) or x.value is None:
        return None
    return np.asarray(x.value, float)
