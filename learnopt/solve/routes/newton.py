"""The newton route: smooth losses by proximal Newton steps, each a small p-dim problem.

At the point theta_k the loss is replaced by its second-order model

    L(theta) ~ L_k + g'(theta - theta_k) + 1/2 (theta - theta_k)' H (theta - theta_k),
    g = M'(a * f'(z)),   H = M' diag(a * f''(z)) M + mu I,

and the step problem  min  model + penalties  subject to every requirement  is solved exactly.
It is one cvxpy problem compiled once with Parameters (the factor F with F'F = H and the linear
term), re-solved with warm starts; when there are no requirements and only squared (l2)
penalties it is a linear system solved with numpy instead. A backtracking line search on the
true objective (Armijo rule, Lee, Sun and Saunders 2014, "Proximal Newton-type methods for
minimizing composite functions") makes every step a descent step, and the iteration stops when
learnopt's certificate passes, so the answer is certified exactly as on the direct route.
Where the first model is nearly flat (almost every row on a straight piece of the loss, e.g.
huber with the residuals at the start far beyond delta), the first step borrows the squared
loss's curvature M'AM.
mu starts at 1e-10 of the mean diagonal of M'AM (it keeps the step problem strictly convex when
H is singular, e.g. squared hinge with few rows inside the margin), grows 1000-fold when a step
problem fails or a step does not descend (Levenberg-Marquardt damping) and shrinks again after
full steps.
"""
from __future__ import annotations

import time
import warnings

import cvxpy as cp
import numpy as np
import scipy.sparse as sp

from learnopt.terms.penalties import Separable
from learnopt.solve.routes.base import RouteSpec, SOLVER_FAULTS, Outcome, RunnerBase, read_multipliers, run
from learnopt.problem.algebra import loss_argument, penalty_value, requirement_constraint, row_loss

MAX_STEPS = 60
ARMIJO = 1e-4
FLAT = 1e-2                             # trace(H) / trace(M' A M) below this at the start: nearly flat
MIN_DAMPING, MAX_DAMPING = 1e-10, 1e8   # mu / (mean diagonal of M' A M)


def eligible(task) -> str | None:
    if not task.loss.smooth:
        return f"it needs a smooth loss (this task has {task.loss.describe()}, which has kinks)"
    try:
        task.loss.given(np.ones(1)).curvature(np.zeros(1))
    except NotImplementedError:
        return f"the loss {task.loss.describe()} declares no curvature"
    return None


def _plain_ridge(task) -> np.ndarray | None:
    """Per-coefficient c in sum_j c_j w_j^2 when the step is a linear system, else None."""
    if task.requirements or not all(isinstance(p, Separable) for p in task.penalties):
        return None
    parts = [p.separable(task.features) for p in task.penalties]
    if any(np.any(a != 0) for a, _ in parts):
        return None
    return sum((c for _, c in parts), np.zeros(len(task.features)))


class Runner(RunnerBase):
    name = "newton"

    def __init__(self, task, vary: int | None = None):
        t0 = time.perf_counter()
        self.task, self.vary = task, vary
        p = task.dataset.d + int(task.intercept)
        self.p = p
        self.ridge = _plain_ridge(task)
        self.size = max(self._rows() / p, 1e-300)
        self.problem_class = task.problem_class(loss_cone="quadratic")
        if self.ridge is None:
            theta = cp.Variable(p, name="theta")
            v = cp.Variable(p, name="v")
            self.F = cp.Parameter((p, p), name="factor")
            self.lin = cp.Parameter(p, name="linear")
            objective = 0.5 * cp.sum_squares(v) + self.lin @ theta + self.penalties_expr(theta[: task.dataset.d])
            with warnings.catch_warnings():
                warnings.simplefilter("ignore", RuntimeWarning)
                self.pairs = [(r, requirement_constraint(r, theta)) for r in task.requirements]
                self.problem = cp.Problem(cp.Minimize(objective),
                                          [v == self.F @ theta] + [c for _, c in self.pairs])
            self.theta = theta
        self.build_seconds = time.perf_counter() - t0

    def set_strength(self, lam: float) -> None:
        super().set_strength(lam)
        if self.ridge is not None:
            self.ridge = _plain_ridge(self.task)

    def _rows(self) -> float:
        """Hold the loss argument's rows (M, q, a); return trace(M'AM), the damping's scale."""
        self.M, self.q, self.a = loss_argument(self.task)
        self.loss = row_loss(self.task)
        return _weighted_trace(self.M, self.a)

    # ---- the true objective
    def objective(self, theta):
        """The task's objective, with the design and row weights held by the runner (line searches)."""
        return float(self.a @ self.loss.value(self.M @ theta - self.q) + penalty_value(self.task, theta))

    def penalty(self, theta):
        return penalty_value(self.task, theta)

    def _model(self, theta):
        """Gradient and Hessian of the mean loss at theta."""
        loss = self.loss
        z = self.M @ theta - self.q
        g = self.M.T @ (self.a * loss.gradient(z))
        h = self.a * loss.curvature(z)
        H = _weighted_gram(self.M, h)
        return g, H

    def _squared_metric(self):
        """M' A M: the squared loss's curvature (a nearly flat first model borrows it)."""
        return _weighted_gram(self.M, self.a)

    # ---- one step
    def _step(self, theta, g, H, mu, spec, options, verbose, warm):
        p = self.p
        Hm = H + mu * np.eye(p)
        if self.ridge is not None:
            d = self.task.dataset.d
            c2 = np.zeros(p)
            c2[:d] = 2.0 * self.ridge
            rhs = -(g + c2 * theta)
            new = theta + np.linalg.solve(Hm + np.diag(c2), rhs)
            return "optimal", new, [], 0.0, 0.0
        self.F.value = _factor(Hm)
        self.lin.value = g - Hm @ theta
        status, compile_s, solve_s, _ = run(self.problem, spec, options, verbose, warm)
        new = self.theta.value
        return status, (None if new is None else np.asarray(new, float).copy()), \
            read_multipliers(self.pairs), compile_s, solve_s

    def run(self, spec, options: dict, verbose: bool, warm: bool = False) -> Outcome:
        task = self.task
        t_run = time.perf_counter()
        goal_s = 0.0
        theta = np.zeros(self.p) if self.start is None else np.asarray(self.start, float).copy()
        mults = [np.zeros(r.rows) if r.sense != "norm" else 0.0 for r in task.requirements]
        compile_s = 0.0
        first = True
        # line search from the start when theta = 0 meets every rule; otherwise the first
        # (full) step is what makes the point feasible, and the search starts after it
        search = all(r.violation(theta) <= 1e-12 * r.scale() for r in task.requirements)
        status = "optimal"
        f_old = self.objective(theta)
        steps = 0
        mu_scale = MIN_DAMPING
        for steps in range(1, MAX_STEPS + 1):
            g, H = self._model(theta)
            if first and np.trace(H) <= FLAT * self.size * self.p:
                # (almost) every row on a straight piece of the loss at the start (huber far from
                # the data, say): the model is nearly flat and its first step, taken whole to meet
                # the rules, would run off; borrow the squared loss's curvature for that step
                H = self._squared_metric()
            mu = mu_scale * self.size
            try:
                status, new, m, c_s, s_s = self._step(theta, g, H, mu, spec, options, verbose, warm or not first)
            except (np.linalg.LinAlgError, *SOLVER_FAULTS) as exc:
                status, new, m, c_s = f"step failed: {str(exc).splitlines()[0][:120]}", None, mults, 0.0
            compile_s += c_s
            if new is None or not np.all(np.isfinite(new)) or status not in ("optimal", "optimal_inaccurate"):
                # a flat model (e.g. huber rows all on the linear pieces) can make the step
                # problem unbounded: damp it (Levenberg-Marquardt) and try again
                mu_scale *= 1e3
                if mu_scale <= MAX_DAMPING:
                    continue
                if first:
                    return Outcome(status, new, None, m, compile_s, 0.0, steps, note="the first step failed")
                break
            # line search on the true objective
            delta = new - theta
            decrease = float(g @ delta + self.penalty(new) - self.penalty(theta))
            t, f_new = 1.0, self.objective(new)
            if search:
                while not f_new <= f_old + ARMIJO * t * decrease and t > 1e-10:
                    t *= 0.5
                    f_new = self.objective(theta + t * delta)
            if t <= 1e-10:
                mu_scale *= 1e3            # the model is far too optimistic: damp it and retry
                if mu_scale > MAX_DAMPING:
                    break
                continue
            # Levenberg-Marquardt: damp more after a shortened step, less after a full one
            mu_scale = max(mu_scale * 1e-2, MIN_DAMPING) if t == 1.0 else min(mu_scale * 10.0, MAX_DAMPING)
            theta = theta + t * delta if t < 1.0 else new
            mults = m
            first, search = False, True
            progress = abs(f_old - f_new)
            f_old = f_new
            # certify only once the model predicts that little is left (the Newton decrement;
            # after a step with decrease e the point is typically e^2 from optimal)
            # (and only once the decrement is below the solver tolerance: a point certified
            # at gap_tol can still be far from the optimum's coefficients)
            if self.goal is not None and -decrease <= min(0.1 * self.settings.gap_tol, self.settings.tol) * max(1.0, abs(f_new)):
                t_goal = time.perf_counter()
                reached = self.goal(theta, None, mults)
                goal_s += time.perf_counter() - t_goal
                if reached:
                    break
            if progress <= 1e-16 * max(1.0, abs(f_new)) and t == 1.0:
                break                      # nothing left to gain at double precision
            if self.goal is None and t == 1.0 and -decrease <= 0.1 * self.settings.gap_tol * max(1.0, abs(f_new)):
                break                      # no certificate asked for: the decrement is small enough
        solve_s = time.perf_counter() - t_run - compile_s - goal_s   # steps, Hessians and line searches
        return Outcome(status, theta, None, mults, compile_s, solve_s, steps,
                       solved_by="numpy" if self.ridge is not None else None)


def _weighted_gram(M, h):
    """M' diag(h) M for the Design operator (dense or sparse X), intercept handled blockwise."""
    X, s = M.X, M.s
    w = h if s is None else h * s * s
    if sp.issparse(X):
        XtX = (X.T @ sp.diags(w) @ X).toarray()
        Xw = np.asarray(X.T @ w).ravel()
    else:
        sw = np.sqrt(np.maximum(w, 0.0))
        Xs = X * sw[:, None]
        XtX = Xs.T @ Xs
        Xw = X.T @ w
    if not M.intercept:
        return XtX
    p = X.shape[1] + 1
    H = np.empty((p, p))
    H[:-1, :-1] = XtX
    H[:-1, -1] = H[-1, :-1] = Xw
    H[-1, -1] = w.sum()
    return H


def _weighted_trace(M, h) -> float:
    """trace(M' diag(h) M) = sum_i h_i |m_i|^2, without forming the Gram matrix."""
    X, s = M.X, M.s
    w = h if s is None else h * s * s
    rows = np.asarray(X.multiply(X).sum(axis=1)).ravel() if sp.issparse(X) else np.einsum("ij,ij->i", X, X)
    return float(w @ rows + (w.sum() if M.intercept else 0.0))


def _factor(H):
    """F with F'F = H (H symmetric positive definite up to round-off)."""
    try:
        return np.linalg.cholesky(H).T     # numpy, not scipy: see the note in compressed.py
    except np.linalg.LinAlgError:
        vals, vecs = np.linalg.eigh(H)
        return np.sqrt(np.maximum(vals, 0.0))[:, None] * vecs.T


ROUTE = RouteSpec("newton", "smooth losses: proximal Newton steps, each a small p-dimensional problem", eligible, Runner)
