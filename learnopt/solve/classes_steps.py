"""Newton steps with rules and any penalty, for the multinomial loss of a task with several classes.

Each step minimises the loss's second-order model at the current point plus the penalties
themselves, subject to the rules and the identification (a proximal Newton step with linear
constraints; J. D. Lee, Y. Sun and M. A. Saunders, Proximal Newton-type methods for minimizing
composite functions, SIAM J. Optim. 24(3), 2014; from memory):

    min_delta  g'delta + |L'delta|^2 / 2 + R(w + delta_w)   s.t. the rules hold at theta + delta

with H = L L' the loss's Hessian (:func:`learnopt.solve.classes_newton.hessian`). The program has
one variable per coefficient, not per row, so it is small; Clarabel solves it. The step is
taken with a backtracking line search on the whole objective (the rules hold at every point of
the segment once they hold at both ends). At the end the program's multipliers are the rules'
multipliers for the certificate.
"""
from __future__ import annotations

import time
import warnings

import cvxpy as cp
import numpy as np
from scipy.special import logsumexp, softmax

from learnopt.problem.algebra import requirement_constraint
from learnopt.solve.classes_newton import MAX_STEPS, design, hessian
from learnopt.solve.routes.base import read_multipliers
from learnopt.solve.small import quiet
from learnopt.terms.class_losses import one_hot

SUBPROBLEM = dict(tol_gap_abs=1e-12, tol_gap_rel=1e-12, tol_feas=1e-12, max_iter=200)


def stepped(problem, *, time_limit: float | None = None) -> tuple[np.ndarray, int, float, list]:
    """(theta, steps, seconds, multipliers of the rules) for a multinomial task with rules or
    non-quadratic penalties."""
    t0 = time.perf_counter()
    ds = problem.dataset
    X, a, y = ds.X, ds.weights / ds.weights.sum(), ds.y.astype(int)
    d, c, K = len(problem.features), len(problem.carried), len(problem.labels)
    cols = np.array([problem.labels.index(v) for v in problem.carried])
    Y = one_hot(y, K)
    Xh = design(X, problem.intercept)
    pens, names = problem.flat_penalties(), problem.flat
    E = problem.identification()
    theta = np.zeros(problem.size)

    def objective(th):
        Z = problem.scores(X, th)
        loss = float(a @ (logsumexp(Z, axis=1) - Z[np.arange(len(Z)), y]))
        return loss + sum(p.value(th[: d * c], names) for p in pens), Z

    # one program, compiled once: the point, gradient and Hessian factor are parameters
    delta = cp.Variable(problem.size)
    at = cp.Parameter(problem.size)
    grad = cp.Parameter(problem.size)
    factor = cp.Parameter((problem.size, problem.size))
    new = at + delta
    model = grad @ delta + 0.5 * cp.sum_squares(factor @ delta)
    model = model + sum(p.expr(new[: d * c], names) for p in pens)
    pairs = [(r, requirement_constraint(r, new)) for r in problem.requirements]
    cons = [con for _, con in pairs] + ([np.vstack(E) @ new == 0] if E else [])
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        program = cp.Problem(cp.Minimize(model), cons)
    F, Z = objective(theta)
    mults, steps = None, 0
    feasible = all(r.violation(theta) <= 0.0 for r in problem.requirements)
    for steps in range(1, MAX_STEPS + 1):
        P = softmax(Z, axis=1)
        R = (P - Y)[:, cols] * a[:, None]
        g_w = np.asarray(X.T @ R).T.ravel()
        g = np.concatenate([g_w, R.sum(axis=0)]) if problem.intercept else g_w
        values, vectors = np.linalg.eigh(hessian(Xh, a, P[:, cols], problem.intercept, np.zeros(d * c), d, c))
        at.value, grad.value = theta, g
        factor.value = (vectors * np.sqrt(np.clip(values, 0.0, None))).T
        with warnings.catch_warnings(), quiet(True):
            warnings.simplefilter("ignore")
            try:
                program.solve(solver="CLARABEL", **SUBPROBLEM)
            except cp.error.SolverError:
                break
        if delta.value is None or program.status not in ("optimal", "optimal_inaccurate"):
            break
        step = np.asarray(delta.value, float)
        mults = read_multipliers(pairs)
        current = sum(p.value(theta[: d * c], names) for p in pens)
        decrease = float(program.value) - current          # the model's change (<= 0 at a feasible point)
        if feasible and -decrease <= 1e-13 * max(1.0, abs(F)):
            theta, (F, Z) = theta + step, objective(theta + step)
            break
        t = 1.0
        while True:
            Ft, Zt = objective(theta + t * step)
            if not feasible or Ft <= F + 1e-4 * t * decrease or t < 1e-10:
                break
            t *= 0.5
        if feasible and Ft > F:
            break
        theta, F, Z, feasible = theta + t * step, Ft, Zt, True
        if time_limit is not None and time.perf_counter() - t0 > time_limit:
            break
    if mults is None:
        mults = [0.0 if r.sense == "norm" else np.zeros(r.rows) for r in problem.requirements]
    return theta, steps, time.perf_counter() - t0, mults
