"""What every route shares: the loss argument, requirement constraints, one solver run.

A route turns a task into one or more cvxpy problems and returns an :class:`Outcome` per
solver attempt: the point theta = (w, b), the loss dual point u (one value per row, used by
the certificate) and one multiplier per requirement (in ``task.requirements`` order).
"""
from __future__ import annotations

import contextlib
import os
import sys
import time
import warnings
from dataclasses import dataclass, field

import cvxpy as cp
import numpy as np
import scipy.sparse as sp

from ..rules import Requirement


@dataclass
class Outcome:
    """One solver attempt on a route, before learnopt certifies it."""

    status: str                          # the solver's word, through cvxpy ("optimal", "infeasible", ...)
    theta: np.ndarray | None = None
    u: np.ndarray | None = None          # loss dual point per row (None: use the loss gradient)
    multipliers: list = field(default_factory=list)
    compile_seconds: float = 0.0
    solve_seconds: float = 0.0
    iterations: int | None = None
    note: str = ""
    solved_by: str | None = None         # set when the route solved without the solver it was given
    details: dict = field(default_factory=dict)   # route facts for fit.extras (factor used, rows kept...)


def design_with_ones(X, intercept: bool):
    if not intercept:
        return X
    ones = np.ones((X.shape[0], 1))
    return sp.hstack([X, sp.csr_matrix(ones)], format="csr") if sp.issparse(X) else np.hstack([X, ones])


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

    Residual losses: M = [X 1], q = y. Margin losses: M = diag(y) [X 1], q = 0. M is a
    :class:`Design` operator (no copy of X).
    """
    ds = task.dataset
    a = ds.weights / ds.weights.sum()
    if task.loss.argument == "margin":
        return Design(ds.X, task.intercept, ds.y), np.zeros(ds.n), a
    return Design(ds.X, task.intercept), ds.y, a


def objective(task, theta: np.ndarray) -> float:
    """The task's objective at theta, on every row: weighted mean loss plus the penalties."""
    M, q, a = loss_argument(task)
    return float(a @ task.loss.value(M @ theta - q) + penalty_value(task, theta))


def penalty_value(task, theta: np.ndarray) -> float:
    d = task.dataset.d
    return float(sum(p.value(theta[:d], task.features) for p in task.penalties))


class RunnerBase:
    """What every route runner shares: the task it solves and how a path changes one strength.

    A runner built with ``vary=k`` compiles penalty k as (strength Parameter) x (the penalty at
    strength 1), so :meth:`set_strength` moves along a path without recompiling (cvxpy DPP).
    ``start`` is a warm start for iterative routes (the previous point of a path).
    """

    name = "?"
    vary: int | None = None
    strength: cp.Parameter | None = None
    start: np.ndarray | None = None
    # set by the solve loop for iterative routes: goal(theta, u, multipliers) -> certificate
    # passes, and the tolerances it works to
    goal = None
    gap_tol: float = 1e-7
    tol: float = 1e-9

    def penalties_expr(self, w):
        """Sum of the task's penalty expressions, the varied one through the strength Parameter."""
        total = 0
        for k, pen in enumerate(self.task.penalties):
            if k == self.vary:
                if self.strength is None:
                    self.strength = cp.Parameter(nonneg=True, value=float(pen.lam), name="strength")
                total = total + self.strength * pen.with_strength(1.0).expr(w, self.task.features)
            else:
                total = total + pen.expr(w, self.task.features)
        return total

    def set_strength(self, lam: float) -> None:
        self.task = self.task.with_strength(self.vary, lam)
        if self.strength is not None:
            self.strength.value = float(lam)


def requirement_constraint(r: Requirement, theta) -> cp.Constraint:
    if r.sense == "norm":
        return cp.norm(r.A @ theta + r.rhs, r.order) + r.f @ theta <= r.bound
    if r.sense == "==":
        return r.A @ theta == r.rhs
    return r.A @ theta <= r.rhs


def read_multipliers(pairs) -> list:
    """One multiplier per requirement from solved constraints (zeros when the solver gave none)."""
    out = []
    for r, c in pairs:
        dv = c.dual_value
        if dv is None:
            out.append(np.zeros(r.rows) if r.sense != "norm" else 0.0)
        else:
            out.append(float(np.sum(dv)) if r.sense == "norm" else np.asarray(dv, float).ravel())
    return out


@contextlib.contextmanager
def quiet(enabled: bool):
    """Silence a solver's own start-up banner written straight to the C-level stdout."""
    if not enabled:
        yield
        return
    try:
        fd = sys.stdout.fileno()
    except (AttributeError, OSError, ValueError):
        yield
        return
    sys.stdout.flush()
    saved = os.dup(fd)
    try:
        with open(os.devnull, "w") as null:
            os.dup2(null.fileno(), fd)
            yield
    finally:
        os.dup2(saved, fd)
        os.close(saved)


def run(problem: cp.Problem, spec, options: dict, verbose: bool, warm: bool = False):
    """Solve one cvxpy problem with a registry solver: (status, compile s, solve s, iterations).

    Raises cvxpy's SolverError (and ValueError/ArithmeticError from bad numbers) for the
    caller to record as a failed attempt.
    """
    t0 = time.perf_counter()
    with warnings.catch_warnings(), quiet(not verbose):
        warnings.simplefilter("ignore")
        problem.solve(solver=spec.cvxpy_name, verbose=verbose, warm_start=warm, **options)
    wall = time.perf_counter() - t0
    compile_s = float(getattr(problem, "compilation_time", None) or 0.0)
    stats = problem.solver_stats
    solve_s = float(stats.solve_time) if stats is not None and stats.solve_time else max(wall - compile_s, 0.0)
    iterations = getattr(stats, "num_iters", None) if stats is not None else None
    return problem.status, compile_s, solve_s, iterations


SOLVER_FAULTS = (cp.error.SolverError, ValueError, ArithmeticError, RuntimeError)
