"""The zeroing strength: the smallest strength of a penalty at which every coefficient it acts on
is zero, with the task's rules in force. It is the top of the default grid of paths and
cross-validation.

At a strength far above it the fit is the *restricted optimum* theta0: the penalised
coefficients zero (or held away from zero by rules), everything else at its best under the
rules. theta0 stays optimal for the full task at strength lam exactly when the optimality
conditions hold there for some choice of the dual quantities that are not unique at theta0:

    g = M'(a u) + A' mu + (other penalties' subgradients)
    g_j = 0                                       on coefficients the penalty does not act on
    |g_j| <= lam a_j                              on penalised coefficients at zero
    g_j + lam (a_j sign(w_j) + 2 c_j w_j) = 0     on penalised coefficients that rules hold away from zero

with u_i in the loss's subgradient at z_i (one value off a kink, an interval at one), mu >= 0
on the rules' active rows (zero on the others, free for equalities). The smallest such lam is a
small linear program over (lam, mu, u at kinks). Reading lam off one solver's multipliers
instead is wrong when they are not unique: at theta0 a sign rule such as ``a >= 0`` and the
penalty's kink at zero share the work, and a solver may put nearly all of it on the rule, which
put the top of the grid a thousand times too high.
"""
from __future__ import annotations

import cvxpy as cp
import numpy as np

from learnopt.problem.algebra import loss_argument
from learnopt.solve.small import kink_rows, solve_small
from learnopt.terms.penalties import Separable

ZERO = 1e-9          # |w_j| below this (relative) is read as zero
ACTIVE = 1e-7        # a rule row with slack below this (relative) may carry a multiplier


def zeroing_strength(problem, index: int, theta: np.ndarray):
    """(the zeroing strength of penalty ``index``, the rules' multipliers and the loss's dual point
    there) from the
    restricted optimum ``theta``, or None when the penalties or rules are of a kind this exact
    form does not cover (the caller then uses the gradient formula)."""
    unit = problem.penalties[index].with_strength(1.0)
    others = [p for k, p in enumerate(problem.penalties) if k != index]
    if not isinstance(unit, Separable) or not all(isinstance(p, Separable) for p in others):
        return None
    if any(r.sense == "norm" for r in problem.requirements):
        return None
    names = problem.features
    d = problem.dataset.d
    a1, c2 = unit.separable(names)
    if not np.any(a1 > 0):
        return None
    theta = np.asarray(theta, float)
    w = theta[:d]
    M, q, rw = loss_argument(problem)
    z = M @ theta - q
    loss = problem.loss
    u0 = np.asarray(loss.gradient(z), float)
    g0 = np.asarray(M.T @ (rw * u0), float)
    p = theta.size
    variables, pieces, cons = [], [], []
    # the loss's dual values on rows at a kink are free within the subgradient interval
    found = kink_rows(loss, z, rw, 1e-6)
    if found is not None:
        at, low, high = found
        du = cp.Variable(at.size)
        cons += [u0[at] + du >= low, u0[at] + du <= high]
        pieces.append(np.asarray(M[at].T @ np.eye(at.size)) * rw[at] @ du)
    # the rules' multipliers: on active rows only, signed by the rule's sense
    for r in problem.requirements:
        mu = cp.Variable(r.rows)
        if r.sense == "<=":
            slack = r.rhs - r.A @ theta
            inactive = np.flatnonzero(slack > ACTIVE * r.scale())
            cons.append(mu >= 0)
            if inactive.size:
                cons.append(mu[inactive] == 0)
        pieces.append(r.A.T @ mu)
        variables.append(mu)
    # the other penalties: their gradient where the coefficient is non-zero, their interval at zero
    fixed = np.zeros(p)
    for pen in others:
        a, c = pen.separable(names)
        zero = np.abs(w) <= ZERO * max(1.0, float(np.abs(w).max(initial=0.0)))
        fixed[:d] += np.where(zero, 0.0, a * np.sign(w) + 2.0 * c * w)
        sub = np.flatnonzero(zero & (a > 0))
        if sub.size:
            nu = cp.Variable(sub.size)
            cons.append(cp.abs(nu) <= a[sub])
            pieces.append(np.eye(p)[:, sub] @ nu)
    g = cp.Constant(g0 + fixed) + (sum(pieces) if pieces else 0)
    lam = cp.Variable(nonneg=True)
    zero = np.abs(w) <= ZERO * max(1.0, float(np.abs(w).max(initial=0.0)))
    on = np.flatnonzero(a1 > 0)
    at_zero = on[zero[on]]
    held = on[~zero[on]]
    free = np.setdiff1d(np.arange(p), on)
    if free.size:
        cons.append(g[free] == 0)
    if at_zero.size:
        cons.append(cp.abs(g[at_zero]) <= lam * a1[at_zero])
    if held.size:
        cons.append(g[held] + lam * (a1[held] * np.sign(w[held]) + 2.0 * c2[held] * w[held]) == 0)
    if at_zero.size == 0:
        return None
    prob = cp.Problem(cp.Minimize(lam), cons)
    if not solve_small(prob, None) or lam.value is None:
        return None
    u = u0.copy()
    if found is not None:
        u[at] = np.clip(u0[at] + np.asarray(du.value, float), low, high)
    return float(lam.value), [np.asarray(mu.value, float).ravel() for mu in variables], u
