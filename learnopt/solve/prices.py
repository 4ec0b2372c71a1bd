"""Prices that are rates: the fall in the optimal objective per unit relaxation of a rule.

The optimal value v(b) as a function of a rule's right-hand side is convex, and its right
derivative as the rule is relaxed is the *smallest* multiplier the rule can carry among all
valid dual points at the optimum (R. T. Rockafellar, Convex Analysis, 1970, section 29, the
perturbation function and its subgradients; from memory). When the dual point is unique that is
the solver's multiplier. It is not unique when the optimum sits on a kink: a coefficient held at
zero both by an l1 penalty and by a sign rule, or rows at a kink of a piecewise-linear loss.
There a solver may put the whole weight on the rule and report a price that relaxing the rule
does not deliver (a sign rule priced 4.9 where relaxing it moves the optimum by 6e-6).

:func:`smallest_prices` finds, for every binding inequality rule, the smallest total multiplier
over the dual points that meet the optimality conditions at the fit as well as the solver's own
did: a small linear program per rule over the rules' multipliers, the penalties' subgradients at
zero coefficients and the loss's dual values on rows at a kink.
"""
from __future__ import annotations

import cvxpy as cp
import numpy as np

from learnopt.solve.dual_set import ZERO, covered, dual_set
from learnopt.solve.small import solve_small
from learnopt.terms.penalties import Separable

KINK = 1e-9        # |z_i - kink| below this (relative) is a row at a loss kink


def degenerate(problem, theta) -> bool:
    """Is a coefficient held at zero by an l1-type penalty (so that a rule on it may share the
    penalty's kink and its multiplier be non-unique)? Rows at a loss kink alone are left to the
    solver's multiplier for now: there the smallest one depends on which rows a numerical point
    puts exactly at the kink, and two routes' points gave prices 5% apart."""
    d = problem.dataset.d
    w = np.asarray(theta, float)[:d]
    size = max(1.0, float(np.abs(w).max(initial=0.0)))
    for pen in problem.penalties:
        if isinstance(pen, Separable) and np.any((pen.separable(problem.features)[0] > 0) & (np.abs(w) <= ZERO * size)):
            return True
    return False


def smallest_prices(problem, theta, multipliers) -> dict[int, float] | None:
    """{requirement index: its smallest valid total multiplier} for the binding inequality rules
    with a positive multiplier; None when the task has pieces this form does not cover."""
    theta = np.asarray(theta, float)
    reqs = list(problem.requirements)
    targets = [k for k, (r, m) in enumerate(zip(reqs, multipliers))
               if r.sense == "<=" and float(np.sum(m)) > 0]
    if not targets:
        return {}
    if not covered(problem, problem.penalties):
        return None
    duals = dual_set(problem, theta, problem.penalties, KINK)
    g, cons, mus = duals.g, duals.constraints, duals.multipliers
    # how well can the optimality conditions be met at this (numerical) point? then ask no more
    # of the other dual points than that
    resid = cp.Variable(nonneg=True)
    best = cp.Problem(cp.Minimize(resid), cons + [cp.abs(g) <= resid])
    if not solve_small(best, None):
        return None
    scale = 1.0 + float(np.abs(np.asarray(duals.M.T @ (duals.a * np.abs(duals.u0)), float)).max(initial=0.0))
    slack = 2.0 * float(resid.value) + 1e-12 * scale
    out = {}
    for k in targets:
        prob = cp.Problem(cp.Minimize(cp.sum(mus[k])), cons + [cp.abs(g) <= slack])
        if solve_small(prob, None):
            out[k] = max(float(prob.value), 0.0)
    return out
