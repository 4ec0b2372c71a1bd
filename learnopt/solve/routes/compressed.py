"""The compressed route: squared loss reduced exactly to a p x p factor, then a small problem.

With row weights a (summing to one), M = [X 1] and theta = (w, b),

    sum_i a_i (m_i' theta - y_i)^2 = theta' G theta - 2 c' theta + y' A y,   G = M' A M, c = M' A y.

Gram + Cholesky (G = R'R): the loss is ||R theta - R^{-T} c||^2 + constant. When G is
ill-conditioned (condition number after column scaling above ``GRAM_LIMIT``: forming G squares the condition
number of the data) or singular, a QR factorisation of sqrt(a) [M y] = Q [R r; 0 rho] is used
instead: the loss is ||R theta - r||^2 + rho^2, with no squaring of the condition number.
Either way the small problem has the same optimum as the full one; penalties and rules are
added to it unchanged. The certificate's dual bound is computed on the factor (the same
quadratic); the objective is recomputed on every row, so rounding in the factor shows in the gap.

Linear algebra here goes through numpy.linalg, not scipy.linalg: with the pip wheels numpy and
scipy each bring their own OpenBLAS, and switching between the two thread pools right after a
large product was measured to turn a 0.3 ms Cholesky into 35-110 ms on a 2-core machine.
"""
from __future__ import annotations

import time
import warnings

import cvxpy as cp
import numpy as np
import scipy.sparse as sp

from learnopt.core.errors import AccuracyWarning
from learnopt.terms.penalties import Separable
from learnopt.solve.certificate import certify
from learnopt.solve.routes.base import RouteSpec, Outcome, RunnerBase, read_multipliers, run
from learnopt.problem.algebra import objective, penalty_value, requirement_constraint

GRAM_LIMIT = 1e8    # largest condition number of the column-scaled G for which Gram + Cholesky is used
QR_DENSE_LIMIT = 2e7  # a sparse design larger than this (rows x columns) is never densified for QR


def eligible(task) -> str | None:
    if task.loss.name != "squared":
        return f"it needs the squared loss (this task has {task.loss.describe()})"
    if getattr(task.dataset, "offset", None) is not None:
        return "it does not take an offset (the newton and direct routes do)"
    return None


def gram(task):
    """(G, c): M' A M and M' A y, with the intercept column handled blockwise (no copy of X)."""
    ds = task.dataset
    X, y = ds.X, ds.y
    a = ds.weights / ds.weights.sum()
    uniform = bool(np.all(a == a[0]))
    if uniform:
        XtX = (X.T @ X) * a[0]
        Xa_sum = np.asarray(X.sum(axis=0)).ravel() * a[0]
        Xty = np.asarray(X.T @ y).ravel() * a[0]
    else:
        AX = sp.diags(a) @ X if sp.issparse(X) else X * a[:, None]
        XtX = X.T @ AX
        Xa_sum = np.asarray(AX.sum(axis=0)).ravel()
        Xty = np.asarray(AX.T @ y).ravel()
    XtX = XtX.toarray() if sp.issparse(XtX) else np.asarray(XtX)
    if not task.intercept:
        return XtX, Xty
    p = ds.d + 1
    G = np.empty((p, p))
    G[:-1, :-1] = XtX
    G[:-1, -1] = G[-1, :-1] = Xa_sum
    G[-1, -1] = a.sum()
    return G, np.append(Xty, a @ y)


CONDITION_WARNING = 1e10   # condition number of the (column-scaled) design beyond which we warn


def _note_condition(eig) -> None:
    """Warn when the data themselves limit the accuracy of the coefficients."""
    cond = float(np.sqrt(eig[-1] / eig[0])) if eig[0] > 0 else np.inf
    if cond > CONDITION_WARNING:
        digits = max(0.0, 16.0 - np.log10(cond)) if np.isfinite(cond) else 0.0
        warnings.warn(f"The design is ill-conditioned (condition number {cond:.1e} after column scaling): "
                      f"coefficients are reliable to about {digits:.0f} significant digits; nearly collinear "
                      f"columns or an unpenalised rank deficiency are the usual causes.", AccuracyWarning,
                      stacklevel=4)


def factor(task) -> tuple[np.ndarray, np.ndarray, str, float]:
    """(R, r, how, constant) with sum_i a_i (m_i' theta - y_i)^2 = ||R theta - r||^2 + constant."""
    G, c = gram(task)
    ds = task.dataset
    yay = float((ds.weights / ds.weights.sum()) @ ds.y ** 2)
    return factor_gram(G, c, yay, lambda: _qr(task), big_sparse=sp.issparse(ds.X) and ds.n * (ds.d + 2) > QR_DENSE_LIMIT)


def factor_gram(G, c, yay: float, qr, big_sparse: bool = False):
    """The factor from the Gram moments G = M'AM, c = M'Ay, yay = y'Ay: Cholesky when the
    column-scaled G is well conditioned, else ``qr()`` (a QR factorisation of the rows, which does
    not square the condition number), or an eigenvalue factor when QR would densify a large
    sparse design (``big_sparse``)."""
    scale = np.sqrt(np.maximum(np.diag(G), np.finfo(float).tiny))
    Gs = G / np.outer(scale, scale)
    eig = np.linalg.eigvalsh(Gs)
    _note_condition(eig)
    ok = eig[0] > 0 and eig[-1] / eig[0] <= GRAM_LIMIT
    if ok:
        try:
            R = np.linalg.cholesky(Gs).T
        except np.linalg.LinAlgError:
            ok = False
    if ok:
        R = R * scale[None, :]      # undo the column scaling: G = (R D)'(R D)
        r = np.linalg.solve(R.T, c)
        return R, r, "gram", yay - float(r @ r)
    if big_sparse:
        # QR would densify a large sparse design: factor the Gram matrix by its eigenvalues
        # instead (exact for the quadratic; accuracy limited by the conditioning of X'X)
        vals, vecs = np.linalg.eigh(G)
        keep = vals > vals.max() * 1e-15
        R = np.sqrt(vals[keep])[:, None] * vecs[:, keep].T
        r = (vecs[:, keep].T @ c) / np.sqrt(vals[keep])
        return R, r, "gram-eig", yay - float(r @ r)
    return qr()


def qr_factor(Rfull: np.ndarray) -> tuple[np.ndarray, np.ndarray, str, float]:
    """(R, r, "qr", 0) from the triangular factor of sqrt(a) [M y]."""
    k = min(Rfull.shape)
    return Rfull[:k, :-1], Rfull[:k, -1], "qr", 0.0


def _qr(task):
    ds = task.dataset
    X = ds.X.toarray() if sp.issparse(ds.X) else ds.X
    sa = np.sqrt(ds.weights / ds.weights.sum())
    cols = [X] + ([np.ones((ds.n, 1))] if task.intercept else []) + [ds.y[:, None]]
    return qr_factor(np.linalg.qr(np.hstack(cols) * sa[:, None], mode="r"))


class Runner(RunnerBase):
    """Compress once, build the small problem once, solve it with whichever solver is asked."""

    name = "compressed"
    # the small problem is dense and well scaled: OSQP (with its polish step) was measured 2x
    # faster than Clarabel on it (lasso, p = 201: 24 ms vs 55 ms); the certificate decides, and
    # the class order follows when OSQP's point does not pass
    prefer = ("osqp",)

    def __init__(self, task, vary: int | None = None, factored=None):
        t0 = time.perf_counter()
        self.task, self.vary = task, vary
        R, r, self.factorisation, self.constant = factored or factor(task)
        self.R, self.r = R, r
        p = R.shape[1]
        theta = cp.Variable(p, name="theta")
        w = theta[: task.dataset.d]
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            objective = cp.sum_squares(R @ theta - r) + self.penalties_expr(w)
            self.pairs = [(q, requirement_constraint(q, theta)) for q in task.requirements]
            self.problem = cp.Problem(cp.Minimize(objective), [c for _, c in self.pairs])
        self.theta = theta
        self.problem_class = task.problem_class()
        self.build_seconds = time.perf_counter() - t0

    def certify(self, theta, u, mults, enough: float = 0.0):
        """The certificate on the factor: the same quadratic, p x p instead of n x p.

        The dual bound is computed for ||R theta - r||^2 + penalties (a valid bound for the
        task up to the rounding of the factor) and shifted by the constant; the primal value is
        recomputed on every row, so any rounding of the factor shows up in the gap.
        """
        task = self.task
        small = certify(M=self.R, q=self.r, a=np.ones(len(self.r)), loss=task.loss, penalties=task.penalties,
                        names=task.features, requirements=list(task.requirements), theta=theta, u=None,
                        multipliers=mults, intercept=task.intercept, enough=enough)
        return small.rebased(self.primal(theta), small.dual + self.constant)

    def primal(self, theta) -> float:
        """The objective recomputed on every row."""
        return objective(self.task, theta)

    def run(self, spec, options: dict, verbose: bool, warm: bool = False) -> Outcome:
        if not self.task.penalties and not self.task.requirements and self.vary is None:
            # plain least squares: the triangular factor answers it directly, at full accuracy
            t0 = time.perf_counter()
            theta = np.linalg.lstsq(self.R, self.r, rcond=None)[0]
            return Outcome("optimal", theta, None, [], 0.0, time.perf_counter() - t0, None,
                           note=f"factor: {self.factorisation}", solved_by="numpy",
                           details={"factor": self.factorisation})
        status, compile_s, solve_s, iterations = run(self.problem, spec, options, verbose, warm)
        theta = self.theta.value
        theta = None if theta is None else np.asarray(theta, float).copy()
        details = {"factor": self.factorisation}
        if theta is not None and np.all(np.isfinite(theta)):
            refined = self.refine(theta)
            if refined is not None:
                theta, details["refined"] = refined, "solved exactly on the active set"
        return Outcome(status, theta, None, read_multipliers(self.pairs), compile_s, solve_s, iterations,
                       note=f"factor: {self.factorisation}", details=details)

    def refine(self, theta):
        """The exact optimum on the solver's active set, when it is one (separable penalties, no
        rules): with the zero coefficients held at zero and the others' signs fixed, the
        objective ||R theta - r||^2 + sum_j (a_j s_j w_j + c_j w_j^2) is a smooth quadratic whose
        minimiser solves one linear system. Kept only when the signs hold and the objective is
        no higher (up to round-off), so it can only sharpen an answer (first-order solvers stop near, not at, the
        optimum; warm-started along a path they stop nearer the previous point)."""
        task = self.task
        if task.requirements or not task.penalties or not all(isinstance(p, Separable) for p in task.penalties):
            return None
        d = task.dataset.d
        a = sum(p.separable(task.features)[0] for p in task.penalties)
        c = sum(p.separable(task.features)[1] for p in task.penalties)
        w = theta[:d]
        zero = (np.abs(w) <= 1e-9 * max(1.0, float(np.abs(w).max(initial=0.0)))) & (a > 0)
        keep = np.flatnonzero(np.concatenate([~zero, np.ones(theta.size - d, bool)]))
        if keep.size == 0:
            return None
        sign = np.sign(w)
        lin = np.zeros(theta.size)
        lin[:d] = a * sign
        quad = np.zeros(theta.size)
        quad[:d] = c
        Rk = self.R[:, keep]
        H = 2.0 * (Rk.T @ Rk) + 2.0 * np.diag(quad[keep])
        rhs = 2.0 * (Rk.T @ self.r) - lin[keep]
        try:
            sol = np.linalg.solve(H, rhs)
        except np.linalg.LinAlgError:
            return None
        new = np.zeros_like(theta)
        new[keep] = sol
        moved = keep[keep < d]
        if np.any(np.sign(new[moved]) != sign[moved]):
            return None                                   # the active set was not the optimal one
        before, after = self._small_objective(theta), self._small_objective(new)
        if after > before + 1e-13 * max(1.0, abs(before + self.constant)):   # round-off allowed
            return None
        return new

    def _small_objective(self, theta) -> float:
        """The objective on the factor (the task's objective less the constant): p x p work."""
        resid = self.R @ theta - self.r
        return float(resid @ resid) + penalty_value(self.task, theta)


ROUTE = RouteSpec("compressed", "squared loss: the design reduced exactly to a p x p factor, then a small problem", eligible, Runner, worth=lambda n, p: n > p)
