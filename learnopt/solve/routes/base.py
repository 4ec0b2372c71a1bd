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
