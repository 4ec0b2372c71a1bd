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

from learnopt.solve.dual_set import covered, dual_set
from learnopt.solve.small import solve_small
from learnopt.terms.penalties import Separable

KINK = 1e-6          # rows this close (relative) to a loss kink have free slopes

def zeroing_strength(problem, index: int, theta: np.ndarray):
    """(the zeroing strength of penalty ``index``, the rules' multipliers and the loss's dual point
    there) from the restricted optimum ``theta``, or None when the penalties or rules are of a
    kind this exact form does not cover (the caller then uses the gradient formula)."""
    unit = problem.penalties[index].with_strength(1.0)
    others = [p for k, p in enumerate(problem.penalties) if k != index]
    if not isinstance(unit, Separable) or not covered(problem, others):
        return None
    a1, c2 = unit.separable(problem.features)
    theta = np.asarray(theta, float)
    w = theta[: problem.dataset.d]
    duals = dual_set(problem, theta, others, KINK)
    g, cons = duals.g, list(duals.constraints)
    lam = cp.Variable(nonneg=True)
    on = np.flatnonzero(a1 > 0)
    at_zero, held = on[duals.zero[on]], on[~duals.zero[on]]
    if at_zero.size == 0:
        return None
    free = np.setdiff1d(np.arange(theta.size), on)
    if free.size:
        cons.append(g[free] == 0)
    cons.append(cp.abs(g[at_zero]) <= lam * a1[at_zero])
    if held.size:
        cons.append(g[held] + lam * (a1[held] * np.sign(w[held]) + 2.0 * c2[held] * w[held]) == 0)
    if not solve_small(cp.Problem(cp.Minimize(lam), cons), None) or lam.value is None:
        return None
    return float(lam.value), [np.asarray(mu.value, float).ravel() for mu in duals.multipliers], duals.dual_point()
