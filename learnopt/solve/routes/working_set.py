"""The working-set route: piecewise-linear losses solved on the rows that matter.

A piecewise-linear loss (hinge, absolute, quantile, epsilon-insensitive) is, on each row, one
of a few affine pieces. Rows that sit well inside a piece at the optimum contribute an affine
function of theta, so they can be folded into one linear term without changing the problem
there. Each round:

1. fold every row outside the working set W into  l' theta + c,  using the piece the row is on
   at the current point (each piece of a convex piecewise-linear loss is a minorant of it, so
   the folded objective is <= the true one everywhere, with equality while no folded row
   changes piece);
2. solve the reduced problem (W's rows with their full loss, the linear term, every penalty
   and requirement) with the solver asked for;
3. certify the new point on every row (the dual point is the reduced problem's for W and the
   folded slopes elsewhere, a valid dual point for the full problem); stop when it passes,
   else add to W the folded rows that changed piece and the rows nearest a kink.

If no folded row changed piece, the reduced optimum is the true optimum (it minimises a
minorant that is exact there). The first point minimises the Moreau envelope of the loss (a
smooth loss within h/2 of it, see :class:`Envelope`) on every row with the newton route, so
most rows start on the piece they end on. In the worst case W grows to every row, which is
the direct route.
"""
from __future__ import annotations

import time
import warnings
from dataclasses import dataclass, replace
from typing import ClassVar

import cvxpy as cp
import numpy as np

from learnopt.terms.losses import Loss
from learnopt.solve.routes import newton
from learnopt.solve.routes.base import RouteSpec, Outcome, RunnerBase, read_multipliers, run
from learnopt.problem.algebra import loss_argument, requirement_constraint
from learnopt.solve.solvers import plan

MAX_ROUNDS = 25
SMOOTHING = 0.05   # envelope width h, relative to the scale of the loss argument


@dataclass(frozen=True)
class Envelope(Loss):
    """Moreau envelope f_h(z) = min_v f(v) + (z - v)^2 / (2h) of a piecewise-linear loss.

    Smooth, within h * max(slope^2) / 2 of f everywhere, with the same pieces away from the
    kinks: its gradient is the slope of f except in a band of width h * (slope jump) at each
    kink, where it rises linearly. Used only to find a good first point for the working set.
    """

    base: Loss
    h: float
    smooth: ClassVar[bool] = True
    cone: ClassVar[str] = "quadratic"

    @property
    def argument(self):
        return self.base.argument

    def _slopes(self):
        k = np.asarray(self.base.kinks(), float)
        probes = np.concatenate([[k[0] - 1.0], (k[:-1] + k[1:]) / 2, [k[-1] + 1.0]])
        return k, self.base.gradient(probes)

    def gradient(self, z):
        k, s = self._slopes()
        g = np.full(np.shape(z), s[0], float)
        for j, kj in enumerate(k):
            g += np.clip((z - kj - self.h * s[j]) / self.h, 0.0, s[j + 1] - s[j])
        return g

    def curvature(self, z):
        k, s = self._slopes()
        inside = sum(((z > kj + self.h * s[j]) & (z < kj + self.h * s[j + 1])).astype(float)
                     for j, kj in enumerate(k))
        return inside / self.h

    def value(self, z):
        g = self.gradient(z)
        return self.base.value(z - self.h * g) + 0.5 * self.h * g ** 2


def eligible(task) -> str | None:
    if task.loss.kinks() is None:
        return f"it needs a piecewise-linear loss (this task has {task.loss.describe()})"
    return None


def _size(n: int, p: int) -> int:
    """Rows in the first working set (and a quarter of it per growth step)."""
    return int(min(n, max(1000, 20 * p)))


class Runner(RunnerBase):
    name = "working-set"

    def __init__(self, task, vary: int | None = None):
        t0 = time.perf_counter()
        self.task, self.vary = task, vary
        self.M, self.q, self.a = loss_argument(task)
        self.kinks = np.asarray(task.loss.kinks(), float)
        self.problem_class = task.problem_class()
        self.build_seconds = time.perf_counter() - t0

    def _distance(self, z):
        """Distance of each row's loss argument to the nearest kink."""
        return np.min(np.abs(z[:, None] - self.kinks[None, :]), axis=1)

    def _piece(self, z):
        """Which piece each row is on: the number of kinks below z."""
        return np.searchsorted(self.kinks, z, side="left")

    def _reduced(self, rows, theta_now, radius: float | None = None):
        """The reduced problem over working rows ``rows`` with the others folded at ``theta_now``.

        ``radius`` adds the trust box |theta - theta_now| <= radius: the folded objective is a
        minorant that can be unbounded along directions the working rows do not hold (the
        intercept, say); the box keeps the step finite, and a step that ends on the box is
        never final (the certificate, which knows nothing of the box, decides).
        """
        task = self.task
        M, q, a = self.M, self.q, self.a
        n, p = M.shape
        theta = cp.Variable(p, name="theta")
        z = cp.Variable(len(rows), name="z")
        Mw = M[rows]
        Xw = Mw.explicit()
        a_w = a[rows]
        tie = z == Xw @ theta - q[rows]
        objective = task.loss.mean_expr(z, a_w)
        folded = np.ones(n, bool)
        folded[rows] = False
        slope = np.where(folded, task.loss.gradient(M @ theta_now - q), 0.0)
        objective = objective + (M.T @ (a * slope)) @ theta
        for pen in task.penalties:
            objective = objective + pen.expr(theta[: task.dataset.d], task.features)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            pairs = [(r, requirement_constraint(r, theta)) for r in task.requirements]
            box = [cp.abs(theta - theta_now) <= radius] if radius is not None else []
            problem = cp.Problem(cp.Minimize(objective), [tie] + [c for _, c in pairs] + box)
        return problem, theta, tie, pairs, a_w

    def _first_point(self, spec, options, verbose):
        """Minimise the Moreau envelope of the loss (smooth) on every row with the newton route
        (skipped when a warm start is given: only the envelope width is returned then)."""
        task = self.task
        if task.loss.argument == "residual":
            y = self.q
            scale = float(np.median(np.abs(y - np.median(y)))) or float(np.std(y)) or 1.0
        else:
            scale = 1.0
        if self.start is not None:
            return Outcome("optimal", None), SMOOTHING * scale
        smooth = replace(task, loss=Envelope(task.loss, SMOOTHING * scale))
        runner = newton.Runner(smooth)
        runner.configure(replace(self.settings, gap_tol=1e-6))
        # the steps are quadratic problems whatever the task's class: use the first QP solver
        qp = plan(runner.problem_class, None)[0]
        if qp.name != spec.name:
            options = qp.settings(1e-8)
        out = runner.run(qp, options, verbose)
        return out, SMOOTHING * scale

    def run(self, spec, options: dict, verbose: bool, warm: bool = False) -> Outcome:
        task = self.task
        M, q, a = self.M, self.q, self.a
        n, p = M.shape
        t_run = time.perf_counter()
        first, h = self._first_point(spec, options, verbose)
        compile_s, goal_s = first.compile_seconds, 0.0
        theta = first.theta if self.start is None else np.asarray(self.start, float)
        if theta is None or not np.all(np.isfinite(theta)):
            theta = np.zeros(p)        # the smoothed start failed: grow W from the rows nearest a kink at 0
        step = _size(n, p)
        working = np.zeros(n, bool)
        status, mults, u, rounds = first.status, first.multipliers, None, 0
        slopes = np.abs(Envelope(task.loss, h)._slopes()[1])
        band = 4.0 * h * float(slopes.max())
        radius = max(1.0, float(np.max(np.abs(theta))))
        for rounds in range(1, MAX_ROUNDS + 1):
            z = M @ theta - q
            dist = self._distance(z)
            # grow W: rows within the smoothing band of a kink, and at least `step` nearest rows
            order = np.argsort(dist)
            order = order[~working[order]]
            take = max(step if rounds == 1 else step // 4, int(np.sum(dist[order] <= band)))
            working[order[:take]] = True
            rows = np.flatnonzero(working)
            before = self._piece(z)
            problem, theta_var, tie, pairs, _ = self._reduced(rows, theta, radius=radius)
            status, c_s, _, _ = run(problem, spec, options, verbose, warm=False)
            compile_s += c_s
            new = theta_var.value
            if new is None or status not in ("optimal", "optimal_inaccurate"):
                return Outcome(status, new, None, read_multipliers(pairs), compile_s,
                               time.perf_counter() - t_run - compile_s - goal_s, rounds,
                               note=f"the reduced problem on {rows.size} rows failed")
            new = np.asarray(new, float)
            u = task.loss.gradient(z)                  # folded rows: the slope of their piece
            nu = tie.dual_value
            if nu is not None:
                u[rows] = -np.asarray(nu, float).ravel() / np.where(a[rows] > 0, a[rows], 1.0)
            on_box = bool(np.max(np.abs(new - theta)) >= (1 - 1e-6) * radius)
            theta, mults = new, read_multipliers(pairs)
            changed = (~working) & (self._piece(M @ theta - q) != before)
            if on_box:
                radius *= 4.0
            elif not changed.any() or working.all():
                break
            t_goal = time.perf_counter()
            reached = self.goal is not None and self.goal(theta, u, mults)
            goal_s += time.perf_counter() - t_goal
            if reached:
                break
            working[changed] = True
        solve_s = time.perf_counter() - t_run - compile_s - goal_s
        return Outcome(status, theta, u, mults, compile_s, solve_s, rounds,
                       note=f"{int(working.sum())} of {n} rows in the working set",
                       details={"working_rows": int(working.sum()), "rounds": rounds})


ROUTE = RouteSpec("working-set", "piecewise-linear losses: solve on the rows near a kink, fold the rest exactly", eligible, Runner, worth=lambda n, p: n >= 4 * _size(n, p))
