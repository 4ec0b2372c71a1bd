"""One small problem compiled once and re-solved for many tasks of the same shape (one fit
per group): the squared loss reduced to its p x p factor (see compressed.py), with the factor
and every rule's rows as cvxpy Parameters, so each group only sets values and solves.

A group's task fits the compiled problem when it has the same coefficients, penalties and
number of rows in each rule (linear rules only); anything else is solved the usual way.
"""
from __future__ import annotations

import time
import warnings

import cvxpy as cp
import numpy as np

from learnopt.solve.routes import compressed
from learnopt.solve.routes.base import RunnerBase


def shape(task) -> tuple | None:
    """What a task must share with the compiled problem; None when it cannot share one."""
    if compressed.eligible(task) is not None or task.sharded or task.dataset.n <= task.dataset.d + 1:
        return None
    if any(r.sense not in ("<=", "==") for r in task.requirements):
        return None
    return (task.coefficient_names, tuple(p.describe() for p in task.penalties),
            tuple((r.sense, r.rows) for r in task.requirements))


class Shared:
    """The compiled problem; :meth:`runner` hands out a compressed-route runner for one task."""

    def __init__(self, task):
        t0 = time.perf_counter()
        self.shape = shape(task)
        p = len(task.coefficient_names)
        self.R, self.r = cp.Parameter((p, p), name="factor"), cp.Parameter(p, name="target")
        theta = cp.Variable(p, name="theta")
        self.A = [cp.Parameter((r.rows, p)) for r in task.requirements]
        self.rhs = [cp.Parameter(r.rows) for r in task.requirements]
        holder = RunnerBase()
        holder.task = task
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            objective = cp.sum_squares(self.R @ theta - self.r) + holder.penalties_expr(theta[: task.dataset.d])
            self.constraints = [(A @ theta <= b) if r.sense == "<=" else (A @ theta == b)
                                for r, A, b in zip(task.requirements, self.A, self.rhs)]
        self.problem = cp.Problem(cp.Minimize(objective), self.constraints)
        self.theta = theta
        self.build_seconds = time.perf_counter() - t0

    def runner(self, task) -> compressed.Runner:
        """A compressed-route runner for ``task`` on the compiled problem (values set, nothing compiled)."""
        run = compressed.Runner.__new__(compressed.Runner)
        run.task, run.vary = task, None
        R, r, run.factorisation, run.constant = compressed.factor(task)
        run.R, run.r = R, r
        self.R.value, self.r.value = R, r
        for req, A, b in zip(task.requirements, self.A, self.rhs):
            A.value, b.value = np.asarray(req.A, float), np.asarray(req.rhs, float)
        run.problem, run.theta = self.problem, self.theta
        run.pairs = list(zip(task.requirements, self.constraints))
        run.problem_class = task.problem_class()
        run.build_seconds = 0.0
        return run
