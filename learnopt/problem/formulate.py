"""Problems as cvxpy programs: the whole problem in one vectorised program (the direct route's
formulation, and ``task.problem()``), and the one-row stand-in the convexity check looks at.

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

from learnopt.problem.algebra import loss_argument, requirement_constraint, row_loss
from learnopt.rules.requirements import Requirement


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


def build(task, penalties_expr=None) -> Model:
    t0 = time.perf_counter()
    ds = task.dataset
    M, q, a = loss_argument(task)
    loss = row_loss(task)
    M = M.explicit()
    p = M.shape[1]
    theta = cp.Variable(p, name="theta")
    w = theta[: ds.d]
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        z_expr = M @ theta - q
        tie = None
        if task.loss.smooth:
            loss_term = loss.mean_expr(z_expr, a)
        else:
            z = cp.Variable(ds.n, name="z")
            tie = z == z_expr
            loss_term = loss.mean_expr(z, a)
        objective = loss_term
        if penalties_expr is not None:
            objective = objective + penalties_expr(w)
        else:
            for pen in task.penalties:
                objective = objective + pen.expr(w, ds.names)
        pairs = [(r, requirement_constraint(r, theta)) for r in task.requirements]
        constraints = ([tie] if tie is not None else []) + [c for _, c in pairs]
        problem = cp.Problem(cp.Minimize(objective), constraints)
    return Model(problem, theta, tie, pairs, M, q, a, time.perf_counter() - t0)


def one_row(problem) -> cp.Problem:
    """The loss on one stand-in row with every penalty and rule: what the convexity check looks
    at (more rows only repeat the loss term, so the verdict is the same and nothing is copied)."""
    theta = cp.Variable(len(problem.coefficient_names))
    stand_in = problem.loss.given(np.ones(1))        # a target of 1 suits every loss
    objective = cp.sum(stand_in.expr(cp.reshape(cp.sum(theta), (1,), order="F")))
    objective = objective + sum(p.expr(theta[: problem.dataset.d], problem.features) for p in problem.penalties)
    return cp.Problem(cp.Minimize(objective), [requirement_constraint(r, theta) for r in problem.requirements])
