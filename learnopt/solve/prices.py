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

from learnopt.problem.algebra import loss_argument
from learnopt.solve.small import kink_rows, solve_small
from learnopt.terms.penalties import Separable

ZERO = 1e-9        # |w_j| below this (relative to the largest) is read as zero
KINK = 1e-9        # |z_i - kink| below this (relative) is a row at a loss kink
ACTIVE = 1e-7      # a rule row with slack below this (relative) may carry a multiplier


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
    if any(r.sense == "norm" for r in reqs) or not all(isinstance(p, Separable) for p in problem.penalties):
        return None
    d, p = problem.dataset.d, theta.size
    w = theta[:d]
    M, q, a = loss_argument(problem)
    z = M @ theta - q
    loss = problem.loss
    u0 = np.asarray(loss.gradient(z), float)
    g = cp.Constant(np.asarray(M.T @ (a * u0), float))
    cons = []
    found = kink_rows(loss, z, a, KINK)
    if found is not None:
        at, low, high = found
        du = cp.Variable(at.size)
        cons += [u0[at] + du >= low, u0[at] + du <= high]
        g = g + (np.asarray(M[at].T @ np.eye(at.size)) * a[at]) @ du
    size_w = max(1.0, float(np.abs(w).max(initial=0.0)))
    zero = np.abs(w) <= ZERO * size_w
    a1 = sum((pen.separable(problem.features)[0] for pen in problem.penalties), np.zeros(d))
    c2 = sum((pen.separable(problem.features)[1] for pen in problem.penalties), np.zeros(d))
    fixed = np.zeros(p)
    fixed[:d] = np.where(zero, 0.0, a1 * np.sign(w) + 2.0 * c2 * w)
    g = g + fixed
    sub = np.flatnonzero(zero & (a1 > 0))
    if sub.size:
        nu = cp.Variable(sub.size)
        cons.append(cp.abs(nu) <= a1[sub])
        g = g + np.eye(p)[:, sub] @ nu
    mus = []
    for r in reqs:
        mu = cp.Variable(r.rows)
        if r.sense == "<=":
            cons.append(mu >= 0)
            inactive = np.flatnonzero(r.rhs - r.A @ theta > ACTIVE * r.scale())
            if inactive.size:
                cons.append(mu[inactive] == 0)
        g = g + r.A.T @ mu
        mus.append(mu)
    # how well can the optimality conditions be met at this (numerical) point? then ask no more
    # of the other dual points than that
    resid = cp.Variable(nonneg=True)
    best = cp.Problem(cp.Minimize(resid), cons + [cp.abs(g) <= resid])
    if not solve_small(best, None):
        return None
    scale = 1.0 + float(np.abs(np.asarray(M.T @ (a * np.abs(u0)), float)).max(initial=0.0))
    slack = 2.0 * float(resid.value) + 1e-12 * scale
    out = {}
    for k in targets:
        prob = cp.Problem(cp.Minimize(cp.sum(mus[k])), cons + [cp.abs(g) <= slack])
        if solve_small(prob, None):
            out[k] = max(float(prob.value), 0.0)
    return out
