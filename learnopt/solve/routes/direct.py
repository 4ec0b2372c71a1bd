"""The direct route: the whole task as one vectorised cvxpy problem.

Variables: theta = (w, b) (b only with an intercept). The loss argument z = M theta - q
(residual: M = [X 1], q = y; margin: M = diag(y) [X 1], q = 0). For non-smooth losses z is a
variable tied to M theta - q by an equality whose dual value is the certificate's dual point.
"""
from __future__ import annotations

import os

import numpy as np
import scipy.sparse as sp

from learnopt.core.errors import TooLargeError
from learnopt.problem.algebra import row_loss
from learnopt.problem.formulate import build
from learnopt.solve.routes.base import Outcome, RouteSpec, RunnerBase, read_multipliers, run


BYTES_PER_NONZERO = 300   # peak memory per design nonzero of compiling and solving (measured 226-260 B
                          # with cvxpy 1.9 + Clarabel, n = 20000, d = 50; rounded up)


def eligible(task) -> str | None:
    """The direct route takes every task (memory permitting: see :func:`check_size`)."""
    return None


def _available_bytes() -> float:
    try:
        return float(os.sysconf("SC_AVPHYS_PAGES") * os.sysconf("SC_PAGE_SIZE"))
    except (ValueError, OSError, AttributeError):
        return float("inf")


def check_size(task, available: float | None = None) -> None:
    """Refuse, before compiling, a direct problem whose compilation would not fit in memory."""
    X = task.dataset.X
    nnz = (X.nnz if sp.issparse(X) else X.size) + task.dataset.n * (1 + int(task.intercept))
    nnz += sum(int(np.count_nonzero(r.A)) for r in task.requirements)
    need = BYTES_PER_NONZERO * nnz
    available = _available_bytes() if available is None else available
    if need <= 0.5 * available:
        return
    raise TooLargeError(
        f"The direct route would need about {need / 2**30:.1f} GiB to compile this task "
        f"({task.dataset.n} rows, {nnz} nonzeros) and {available / 2**30:.1f} GiB is free")


class Runner(RunnerBase):
    """The direct route: build the one problem once, solve it with whichever solver is asked."""

    name = "direct"

    def __init__(self, task, vary: int | None = None):
        check_size(task)
        self.task, self.vary = task, vary
        self.model = build(task, self.penalties_expr)
        self.build_seconds = self.model.build_seconds
        self.problem_class = task.problem_class()

    def run(self, spec, options: dict, verbose: bool, warm: bool = False) -> Outcome:
        model = self.model
        status, compile_s, solve_s, iterations = run(model.problem, spec, options, verbose, warm)
        theta = model.theta.value
        if theta is not None:
            theta = np.asarray(theta, float).copy()
        u = self.dual_point(theta) if theta is not None and np.all(np.isfinite(theta)) else None
        return Outcome(status, theta, u, read_multipliers(model.constraints), compile_s, solve_s, iterations)

    def dual_point(self, theta: np.ndarray) -> np.ndarray:
        """The loss dual point u (one per row): the tie's dual value, or the loss gradient."""
        model = self.model
        nu = model.tie.dual_value if model.tie is not None else None
        if nu is None:
            return row_loss(self.task).gradient(model.M @ theta - model.q)
        nu = np.asarray(nu, float).ravel()
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.where(model.a > 0, -nu / model.a, 0.0)


ROUTE = RouteSpec("direct", "the whole problem as one vectorised cvxpy program; takes every problem",
                  eligible, Runner)
