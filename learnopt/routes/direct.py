"""The direct route: the whole task as one vectorised cvxpy problem.

Variables: theta = (w, b) (b only with an intercept). The loss argument z = M theta - q
(residual: M = [X 1], q = y; margin: M = diag(y) [X 1], q = 0). For non-smooth losses z is a
variable tied to M theta - q by an equality whose dual value is the certificate's dual point.
"""
from __future__ import annotations

import time
import warnings
from dataclasses import dataclass

import cvxpy as cp
import numpy as np
import scipy.sparse as sp

from ..rules import Requirement


@dataclass
class Model:
    problem: cp.Problem
    theta: cp.Variable
    tie: cp.Constraint | None                      # z == M theta - q (non-smooth losses)
    constraints: list[tuple[Requirement, cp.Constraint]]
    M: np.ndarray | sp.csr_matrix
    q: np.ndarray
    a: np.ndarray
    build_seconds: float


def design_with_ones(X, intercept: bool):
    if not intercept:
        return X
    ones = np.ones((X.shape[0], 1))
    return sp.hstack([X, sp.csr_matrix(ones)], format="csr") if sp.issparse(X) else np.hstack([X, ones])


def loss_argument(task):
    """(M, q) with z = M theta - q."""
    ds = task.dataset
    Xt = design_with_ones(ds.X, task.intercept)
    if task.loss.argument == "margin":
        M = sp.diags(ds.y) @ Xt if sp.issparse(Xt) else ds.y[:, None] * Xt
        return (M.tocsr() if sp.issparse(M) else M), np.zeros(ds.n)
    return Xt, ds.y


def requirement_constraint(r: Requirement, theta) -> cp.Constraint:
    if r.sense == "norm":
        return cp.norm(r.A @ theta + r.rhs, r.order) + r.f @ theta <= r.bound
    if r.sense == "==":
        return r.A @ theta == r.rhs
    return r.A @ theta <= r.rhs


def build(task) -> Model:
    t0 = time.perf_counter()
    ds = task.dataset
    M, q = loss_argument(task)
    a = ds.weights / ds.weights.sum()
    p = M.shape[1]
    theta = cp.Variable(p, name="theta")
    w = theta[: ds.d]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        z_expr = M @ theta - q
        tie = None
        if task.loss.smooth:
            loss_term = task.loss.mean_expr(z_expr, a)
        else:
            z = cp.Variable(ds.n, name="z")
            tie = z == z_expr
            loss_term = task.loss.mean_expr(z, a)
        objective = loss_term
        for pen in task.penalties:
            objective = objective + pen.expr(w, ds.names)
        pairs = [(r, requirement_constraint(r, theta)) for r in task.requirements]
        constraints = ([tie] if tie is not None else []) + [c for _, c in pairs]
        problem = cp.Problem(cp.Minimize(objective), constraints)
    return Model(problem, theta, tie, pairs, M, q, a, time.perf_counter() - t0)


def dual_point(task, model: Model, theta: np.ndarray) -> np.ndarray:
    """The loss dual point u (one per row) at the returned solution."""
    if model.tie is None:
        return task.loss.gradient(model.M @ theta - model.q)
    nu = model.tie.dual_value
    if nu is None:
        return task.loss.gradient(model.M @ theta - model.q)
    nu = np.asarray(nu, float).ravel()
    with np.errstate(divide="ignore", invalid="ignore"):
        u = np.where(model.a > 0, -nu / model.a, 0.0)
    return u


def multipliers(model: Model) -> list:
    out = []
    for r, c in model.constraints:
        dv = c.dual_value
        if dv is None:
            out.append(np.zeros(r.rows) if r.sense != "norm" else 0.0)
        else:
            out.append(float(np.sum(dv)) if r.sense == "norm" else np.asarray(dv, float).ravel())
    return out


def elastic(task, tol: float = 1e-7):
    """Smallest total slack that makes the requirements hold together (no loss).

    Returns {rule text: slack} for the rules that need slack, or None when the solve fails.
    """
    reqs = task.requirements
    if not reqs:
        return {}
    p = task.dataset.d + int(task.intercept)
    theta = cp.Variable(p)
    s = cp.Variable(len(reqs), nonneg=True)
    cons = []
    for k, r in enumerate(reqs):
        scale = r.scale()
        if r.sense == "norm":
            cons.append(cp.norm(r.A @ theta + r.rhs, r.order) + r.f @ theta <= r.bound + scale * s[k])
        elif r.sense == "==":
            cons.append(cp.abs(r.A @ theta - r.rhs) <= scale * s[k])
        else:
            cons.append(r.A @ theta <= r.rhs + scale * s[k])
    prob = cp.Problem(cp.Minimize(cp.sum(s)), cons)
    try:
        prob.solve(solver="CLARABEL")
    except cp.error.SolverError:
        return None
    if prob.status not in (cp.OPTIMAL, cp.OPTIMAL_INACCURATE):
        return None
    out = {}
    for k, r in enumerate(reqs):
        amount = float(s.value[k]) * r.scale()
        if s.value[k] > tol:
            out[r.text] = out.get(r.text, 0.0) + amount
    return out
