"""The maths every layer shares: the loss argument z = M theta - q as an operator, the objective
at a point, and a requirement as a cvxpy constraint.

Objective (the convention everywhere in learnopt)::

    minimise  sum_i a_i f(z_i) + sum_k R_k(w)      a_i = weight_i / sum(weights)

Residual losses: z = [X 1] theta + o - y; margin losses: z = diag(y) [X 1] theta; losses of the
linear predictor (log-link deviances): z = [X 1] theta + o, with each row's target bound into
the loss (:func:`row_loss`). o is the task's offset (0 without one).
"""
from __future__ import annotations

import cvxpy as cp
import numpy as np
import scipy.sparse as sp

from learnopt.data.table import design_with_ones
from learnopt.rules.requirements import Requirement


class Design:
    """M = diag(s) [X 1] as an operator: products with M and M' without copying X.

    Supports ``M @ v`` (v of length p or p x k), ``M.T @ u``, ``M[rows]`` and ``M.shape``.
    """

    def __init__(self, X, intercept: bool, s: np.ndarray | None = None):
        self.X, self.intercept, self.s = X, intercept, s
        self.shape = (X.shape[0], X.shape[1] + int(intercept))

    def __matmul__(self, v):
        v = np.asarray(v, float)
        d = self.X.shape[1]
        out = np.asarray(self.X @ v[:d])
        if self.intercept:
            out = out + v[d]
        if self.s is not None:
            out = out * (self.s if out.ndim == 1 else self.s[:, None])
        return out

    def __getitem__(self, rows):
        return Design(self.X[rows], self.intercept, None if self.s is None else self.s[rows])

    @property
    def T(self):
        return _Adjoint(self)

    def explicit(self):
        """The matrix itself (dense or CSR), for the direct route's cvxpy problem."""
        M = design_with_ones(self.X, self.intercept)
        if self.s is None:
            return M
        return (sp.diags(self.s) @ M).tocsr() if sp.issparse(M) else self.s[:, None] * M


class _Adjoint:
    def __init__(self, design: Design):
        self.design = design

    def __matmul__(self, u):
        D = self.design
        u = np.asarray(u, float)
        if D.s is not None:
            u = u * (D.s if u.ndim == 1 else D.s[:, None])
        out = np.asarray(D.X.T @ u)
        return np.concatenate([out, u.sum(axis=0, keepdims=True)]) if D.intercept else out


def loss_argument(task):
    """(M, q, a) with loss argument z = M theta - q and row weights a summing to one.

    Residual losses: M = [X 1], q = y - o. Margin losses: M = diag(y) [X 1], q = 0. Linear
    predictor: M = [X 1], q = -o. M is a :class:`Design` operator (no copy of X). The loss of
    each row is :func:`row_loss` (the task's loss with the targets bound where it needs them).
    """
    ds = task.dataset
    a = ds.weights / ds.weights.sum()
    offset = getattr(ds, "offset", None)
    if task.loss.argument == "margin":
        return Design(ds.X, task.intercept, ds.y), np.zeros(ds.n), a
    if task.loss.argument == "linear":
        return Design(ds.X, task.intercept), (np.zeros(ds.n) if offset is None else -offset), a
    return Design(ds.X, task.intercept), (ds.y if offset is None else ds.y - offset), a


def row_loss(task):
    """The loss as a function of z alone on each row of the task (targets bound when the loss
    needs them: see :meth:`learnopt.terms.loss_base.Loss.given`)."""
    return task.loss.given(task.dataset.y)


def objective(task, theta: np.ndarray) -> float:
    """The task's objective at theta, on every row: weighted mean loss plus the penalties."""
    M, q, a = loss_argument(task)
    return float(a @ row_loss(task).value(M @ theta - q) + penalty_value(task, theta))


def penalty_value(task, theta: np.ndarray) -> float:
    d = task.dataset.d
    return float(sum(p.value(theta[:d], task.features) for p in task.penalties))


def requirement_constraint(r: Requirement, theta) -> cp.Constraint:
    if r.sense == "norm":
        return cp.norm(r.A @ theta + r.rhs, r.order) + r.f @ theta <= r.bound
    if r.sense == "==":
        return r.A @ theta == r.rhs
    return r.A @ theta <= r.rhs
