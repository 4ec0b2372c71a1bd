"""What every route shares: the route protocol with its defaults (:class:`RunnerBase`), the
settings a solve hands to a route, the outcome of one attempt and the certified candidate made
of it, the route registry's row type, and one solver run.

A route turns a task into one or more cvxpy problems and returns an :class:`Outcome` per
solver attempt: the point theta = (w, b), the loss dual point u (one value per row, used by
the certificate) and one multiplier per requirement (in ``task.requirements`` order).
"""
from __future__ import annotations

import time
import warnings
from dataclasses import dataclass, field
from typing import Callable

import cvxpy as cp
import numpy as np
import pandas as pd

from learnopt.solve.certificate import Certificate, certify_point
from learnopt.solve.small import quiet
from learnopt.solve.timings import Timings


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


@dataclass(frozen=True)
class Candidate:
    """A certified attempt: the point a fit may be built from, with its evidence.

    ``rank`` orders candidates (lower is better): certified first, then feasible, then by gap.
    """

    rank: tuple
    solver: str
    theta: np.ndarray
    certificate: Certificate
    timings: Timings
    prices: pd.Series
    binding: pd.Series
    extras: dict = field(default_factory=dict)


@dataclass(frozen=True)
class Settings:
    """How hard a solve works and when it stops: one value from the solve call to the route.

    tol : solver tolerance (mapped to each solver's own options); gap_tol, feas_tol : what the
    certificate must show for "optimal"; time_limit : seconds per solver attempt; polish :
    tighter re-solves of a solver whose point fails the certificate; fallback : try the next
    capable solver when one fails; solver_options : passed unchanged to the solver; verbose :
    the solver's own log; start : a point (theta) for iterative routes to start from.
    """

    tol: float = 1e-9
    gap_tol: float = 1e-7
    feas_tol: float = 1e-6
    time_limit: float | None = None
    polish: bool = False
    fallback: bool = True
    solver_options: dict = field(default_factory=dict)
    start: np.ndarray | None = None
    verbose: bool = False


Goal = Callable[[np.ndarray, "np.ndarray | None", list], bool]


class RunnerBase:
    """The route protocol, with its defaults. A route's runner is built once per solve (or once
    per path) by ``Runner(problem, vary=None, ...)`` and then:

    - ``run(spec, options, verbose, warm) -> Outcome`` solves with one solver (required);
    - ``certify(theta, u, multipliers, enough) -> Certificate``: learnopt's certificate of a
      point (default: on every row; a route may have a cheaper exact form);
    - ``finish(best) -> Candidate | None``: add route facts known only at the end (default: none);
    - ``prefer``: solver names the route knows suit its problems (tried before the class order);
    - ``problem_class``, ``build_seconds``, ``name``: facts for the solver plan and the fit.

    The solve loop hands the runner its :class:`Settings` and, for iterative routes, a ``goal``
    (goal(theta, u, multipliers) -> does the certificate pass?) through :meth:`configure`.

    A runner built with ``vary=k`` compiles penalty k as (strength Parameter) x (the penalty at
    strength 1), so :meth:`set_strength` moves along a path without recompiling (cvxpy DPP).
    ``start`` is a warm start for iterative routes (the previous point of a path); with
    ``start_multipliers`` as well, the solve loop first checks whether ``start`` is already
    certified (a path's first point, found exactly) and then skips the solvers; ``cold`` asks the
    next solver run not to start from the solver's own last state (a path's search far above
    its grid leaves a state that slows the next point down).
    """

    name: str = "?"
    problem_class: str = "linear"
    build_seconds: float = 0.0
    prefer: tuple[str, ...] = ()
    vary: int | None = None
    strength: cp.Parameter | None = None
    start: np.ndarray | None = None
    start_multipliers: list | None = None   # the rules' multipliers at ``start``, when known exactly
    start_dual: np.ndarray | None = None    # ... and the loss's dual point there (None: its gradient)
    cold: bool = False      # the solver's last state is far from the next point: do not warm-start it
    settings: Settings = Settings()
    goal: Goal | None = None
    last_certificate: Certificate | None = None

    def configure(self, settings: Settings, goal: Goal | None = None) -> None:
        """The solve's settings and, for iterative routes, when to stop."""
        self.settings, self.goal = settings, goal

    def run(self, spec, options: dict, verbose: bool, warm: bool = False) -> "Outcome":  # pragma: no cover
        raise NotImplementedError

    def certify(self, theta, u, multipliers, enough: float = 0.0) -> Certificate:
        return certify_point(self.task, theta, u, multipliers, enough)

    def finish(self, best: Candidate | None) -> Candidate | None:
        return best

    def penalties_expr(self, w):
        """Sum of the task's penalty expressions, the varied one through the strength Parameter."""
        total = 0
        for k, pen in enumerate(self.task.penalties):
            if k == self.vary:
                if self.strength is None:
                    self.strength = cp.Parameter(nonneg=True, value=float(pen.strength), name="strength")
                total = total + self.strength * pen.with_strength(1.0).expr(w, self.task.features)
            else:
                total = total + pen.expr(w, self.task.features)
        return total

    def set_strength(self, strength: float) -> None:
        self.task = self.task.with_strength(self.vary, strength)
        if self.strength is not None:
            self.strength.value = float(strength)


@dataclass(frozen=True)
class RouteSpec:
    """A route as data: its name, what it is for, when it can take a problem, how to build its
    runner, and whether the planner may pick it on its own."""

    name: str
    summary: str
    eligible: Callable[[object], "str | None"]
    runner: Callable[..., RunnerBase]
    automatic: bool = True
    worth: Callable[[int, int], bool] = lambda n, p: True    # is it worth picking for n rows, p columns?


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
