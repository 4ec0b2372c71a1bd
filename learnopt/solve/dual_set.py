"""The set of dual points at a fixed primal point, as cvxpy expressions: what the zeroing strength
(learnopt.selection.zeroing) and the prices at a kink (learnopt.solve.prices) both optimise over.

At theta the stationarity vector is

    g = M'(a u) + sum_k A_k' mu_k + (separable penalties' subgradients)

where u_i is the loss's slope (free within the subgradient interval on rows at a kink), mu_k >= 0
on the active rows of ``<=`` rules (zero on the others, free for equalities), and each
separable penalty contributes its gradient where a coefficient is non-zero and a variable in
[-a_j, a_j] where it is zero. Only linear rules and separable penalties are covered.
"""
from __future__ import annotations

from dataclasses import dataclass

import cvxpy as cp
import numpy as np

from learnopt.problem.algebra import loss_argument, row_loss
from learnopt.solve.small import kink_rows
from learnopt.terms.penalties import Separable

ZERO = 1e-9        # |w_j| below this (relative to max(1, the largest)) is read as zero
ACTIVE = 1e-7      # a rule row with slack below this (relative) may carry a multiplier


@dataclass
class DualSet:
    g: cp.Expression               # the stationarity vector, affine in the variables
    constraints: list              # the variables' own sets
    multipliers: list              # one cvxpy Variable per requirement, in order
    zero: np.ndarray               # which coefficients are read as zero
    u0: np.ndarray                 # the loss's slope at theta
    kink: tuple | None             # (rows, their change Variable, low, high) on rows at a kink
    M: object
    a: np.ndarray

    def dual_point(self) -> np.ndarray:
        """The loss's dual point after a solve (u0 with the kink rows' values filled in)."""
        u = self.u0.copy()
        if self.kink is not None:
            rows, du, low, high = self.kink
            u[rows] = np.clip(self.u0[rows] + np.asarray(du.value, float), low, high)
        return u


def covered(problem, penalties) -> bool:
    """Does this form cover the problem (linear rules, separable penalties only)?"""
    return all(isinstance(p, Separable) for p in penalties) and all(r.sense != "norm" for r in problem.requirements)


def dual_set(problem, theta, penalties, kink_tol: float) -> DualSet:
    """The dual points at ``theta`` with ``penalties`` (separable) taken as fixed parts of the
    problem; rows within ``kink_tol`` of a loss kink have free slopes."""
    theta = np.asarray(theta, float)
    d, p = problem.dataset.d, theta.size
    w = theta[:d]
    M, q, a = loss_argument(problem)
    z = M @ theta - q
    u0 = np.asarray(row_loss(problem).gradient(z), float)
    g = cp.Constant(np.asarray(M.T @ (a * u0), float))
    cons, kink = [], None
    found = kink_rows(problem.loss, z, a, kink_tol)
    if found is not None:
        rows, low, high = found
        du = cp.Variable(rows.size)
        cons += [u0[rows] + du >= low, u0[rows] + du <= high]
        g = g + (np.asarray(M[rows].T @ np.eye(rows.size)) * a[rows]) @ du
        kink = (rows, du, low, high)
    zero = np.abs(w) <= ZERO * max(1.0, float(np.abs(w).max(initial=0.0)))
    for pen in penalties:
        a1, c2 = pen.separable(problem.features)
        fixed = np.zeros(p)
        fixed[:d] = np.where(zero, 0.0, a1 * np.sign(w) + 2.0 * c2 * w)
        g = g + fixed
        sub = np.flatnonzero(zero & (a1 > 0))
        if sub.size:
            nu = cp.Variable(sub.size)
            cons.append(cp.abs(nu) <= a1[sub])
            g = g + np.eye(p)[:, sub] @ nu
    mus = []
    for r in problem.requirements:
        mu = cp.Variable(r.rows)
        if r.sense == "<=":
            cons.append(mu >= 0)
            inactive = np.flatnonzero(r.rhs - r.A @ theta > ACTIVE * r.scale())
            if inactive.size:
                cons.append(mu[inactive] == 0)
        g = g + r.A.T @ mu
        mus.append(mu)
    return DualSet(g, cons, mus, zero, u0, kink, M, a)
