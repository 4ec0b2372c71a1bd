"""Choosing the penalty strength: paths and cross-validation.

A path solves the task for a decreasing grid of strengths of one penalty. The route's problem
is compiled once with the strength as a cvxpy Parameter (DPP), each point starts from the
previous one, and every point is certified like any fit.

The top of the default grid is the smallest strength at which every penalised coefficient is
zero (for l1-type penalties: the dual norm of the gradient at the point where they are zero,
weighted per coefficient), found from one fit at a strength far above it; the grid then falls
geometrically to an end read from the data (:func:`path_end`: where a further decade of
weaker penalty no longer lowers the training loss), or to ``ratio`` times the top when given.

Cross-validation splits the rows into folds (random with a seed, by groups, or in time order),
walks the same grid on each training part with every requirement, and scores the held-out
part with a metric (default: the task's own loss).
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np
import pandas as pd

from learnopt.core.status import Status
from learnopt.core import checks as params
from learnopt.core.progress import ProgressBar
from learnopt.core.errors import MissingDependencyError, ParameterError
from learnopt.problem.algebra import loss_argument, row_loss
from learnopt.selection.zeroing import zeroing_strength
from learnopt.solve.rule_duals import requirement_terms
from learnopt.solve.loop import solve_task
from learnopt.solve.routes import prepare
from learnopt.solve.routes.base import Settings
from learnopt.terms.penalties import CustomPenalty, Penalty, Separable




# ---------------------------------------------------------------- the varied penalty
def _pick(task, penalty) -> tuple[Any, int]:
    """(task, index) with the penalty to vary in the task (added when it is not there yet)."""
    if penalty is None:
        if not task.penalties:
            raise ParameterError("A path or cross-validation needs a penalty to vary: pass penalty=lo.penalty.l1(1.0) "
                                 "(its strength is replaced along the grid), or add one with .penalize().")
        index = 0
    elif isinstance(penalty, int):
        if not 0 <= penalty < len(task.penalties):
            count = len(task.penalties)
            raise params.refusal("path", "penalty", penalty,
                                 f"an index from 0 to {count - 1} (the task has {count} penalties)" if count else
                                 "a penalty object such as lo.penalty.l1(1.0) (the task has no penalty to index)")
        index = penalty
    elif isinstance(penalty, Penalty):
        matches = [k for k, p in enumerate(task.penalties) if p == penalty]
        if matches:
            index = matches[0]
        else:
            task = task.penalize(penalty)
            index = len(task.penalties) - 1
    else:
        raise params.refusal("path", "penalty", penalty, "a penalty object such as lo.penalty.l1(1.0), or the "
                                                         "index of one of the task's penalties")
    if isinstance(task.penalties[index], CustomPenalty):
        raise ParameterError("A custom penalty has no strength to vary; give it its own strength "
                             "in the expression and fit each value, or vary a built-in penalty.")
    return task, index


def zero_strength(task, index: int, fit) -> float:
    """The smallest strength of penalty ``index`` at which its penalised coefficients are zero.

    ``fit`` is a certified fit at a strength above that (all penalised coefficients zero);
    the answer is the dual norm of the rest of the stationarity condition there.
    """
    M, q, a = loss_argument(task)
    theta = fit.theta
    u = row_loss(task).gradient(M @ theta - q)
    g = M.T @ (a * u) + requirement_terms(task.requirements, fit.extras.get("multipliers", []), theta)[0]
    # the other penalties' gradients at the point (their coefficients may be non-zero)
    d = task.dataset.d
    names = task.features
    for k, pen in enumerate(task.penalties):
        if k != index and isinstance(pen, Separable):
            a1, c2 = pen.separable(names)
            g[:d] = g[:d] + a1 * np.sign(theta[:d]) + 2.0 * c2 * theta[:d]
    unit = task.penalties[index].with_strength(1.0)
    gw = g[:d]
    if isinstance(unit, Separable):
        weight, _ = unit.separable(names)
        on = weight > 0
        if not on.any():
            raise ParameterError(f"{unit.describe_name()} never sets coefficients to zero, so the grid "
                                 f"has no natural top; pass grid=[...] with the strengths to try.")
        # coefficients that rules hold away from zero at every strength do not set the top
        w = theta[:d]
        free = on & (np.abs(w) <= 1e-9 * max(1.0, float(np.max(np.abs(w), initial=0.0))))
        if not free.any():
            raise ParameterError("The rules keep every penalised coefficient away from zero; "
                                 "pass grid=[...] explicitly.")
        return float(np.max(np.abs(gw[free]) / weight[free]))
    scale = 1e6 / max(float(np.max(np.abs(gw))), 1e-300)
    s = unit.shrink(-gw * scale, names)
    return float(1.0 / (s * scale)) if s < 1.0 else 0.0


# ---------------------------------------------------------------- path
@dataclass(repr=False)
class Path:
    """A path over strengths of one penalty.

    Attributes
    ----------
    table : DataFrame, one row per strength: strength, status, objective, gap, rel_gap,
        training_loss (the weighted mean loss, penalties excluded), nonzero (coefficients
        with |w| > 1e-8 max(1, max|w|)), seconds.
    coefs : DataFrame, one row per strength, one column per coefficient name.
    fits : the certified fit at each strength, in grid order.
    penalty : the varied penalty at strength 1; strengths multiply it.
    stopped : why the path ends where it does. The default grid runs from the zeroing strength
        down to an end read from the data (:func:`path_end`): where a further decade of weaker
        penalty no longer lowers the training loss, 6 decades at most.
    """

    table: pd.DataFrame
    coefs: pd.DataFrame
    fits: list = field(repr=False)
    penalty: Penalty | None = None
    stopped: str = ""

    def __repr__(self) -> str:
        t = self.table
        if not len(t):
            return "Path(no strengths)"
        certified = int((t["status"] == "optimal").sum())
        what = self.penalty.describe() if self.penalty is not None else "penalty"
        return (f"Path({len(t)} strengths of {what} from {t['strength'].max():.4g} down to {t['strength'].min():.4g}, "
                f"{certified} certified; non-zero {int(t['nonzero'].iloc[0])} -> {int(t['nonzero'].iloc[-1])})")

    def plot(self, ax=None):
        """Each coefficient against the strength, strength increasing left to right (log scale):
        from the left (weak penalty, every coefficient free) each line falls to zero as the
        penalty grows; a dot marks where a coefficient first reaches zero, and each line is
        named at its left end (up to 12 names). Returns the axes (matplotlib)."""
        plt = _pyplot()
        ax = ax or plt.subplots(figsize=(7, 4))[1]
        strengths = self.coefs.index.to_numpy()
        order = np.argsort(strengths)
        x = strengths[order]
        named = len(self.coefs.columns) <= 12
        for k, name in enumerate(self.coefs.columns):
            y = self.coefs[name].to_numpy()[order]
            colour = PALETTE[k % len(PALETTE)]
            ax.plot(x, y, color=colour, lw=1.4)
            zero = np.flatnonzero(np.abs(y) <= 1e-12 * max(1.0, float(np.max(np.abs(y), initial=0.0))))
            if zero.size and zero[0] > 0:
                ax.plot([x[zero[0]]], [0.0], "o", ms=3.5, color=colour)
            if named:
                ax.annotate(str(name), (x[0], y[0]), xytext=(-4, 0), textcoords="offset points", ha="right",
                            va="center", fontsize=7, color=colour)
        ax.axhline(0.0, color="#999", lw=0.8)
        ax.set_xscale("log")
        if named and len(x):
            lo_x, hi_x = ax.get_xlim()
            ax.set_xlim(lo_x / (hi_x / lo_x) ** 0.18, hi_x)      # room for the names on the left
        ax.set_xlabel("penalty strength")
        ax.set_ylabel("coefficient")
        ax.spines[["top", "right"]].set_visible(False)
        return ax


def _pyplot():
    try:
        import matplotlib.pyplot as plt
    except ImportError:
        raise MissingDependencyError("Plots need matplotlib: pip install 'learnopt[plot]'.") from None
    return plt


def _training_loss(task, fit) -> float:
    """The weighted mean loss: the certified objective minus the penalties."""
    w = fit.coef.to_numpy()
    return float(fit.objective - sum(p.value(w, task.features) for p in task.penalties))


def default_grid(task, index, top_fit, n: int, ratio: float):
    """(the grid, (the rules' multipliers, the loss's dual point) at its top when known exactly,
    else None)."""
    exact = zeroing_strength(task, index, top_fit.theta)
    duals = None
    if exact is None:
        top = zero_strength(task, index, top_fit)
    else:
        top, duals = exact[0], exact[1:]     # zero is optimal there: the path starts at it exactly
    if not np.isfinite(top) or top <= 0:
        raise ParameterError("Every penalised coefficient is zero at every strength (the gradient "
                             "at zero vanishes); pass grid=[...] explicitly.")
    return top * np.geomspace(1.0, ratio or 1.0, n), duals


PALETTE = ("#1f6f50", "#b5482b", "#2c3e91", "#c28f0c", "#6b3d8f", "#2a8fa3", "#8c5a2b", "#c2417a", "#55751f",
           "#5f6b7a")        # learnopt's own line colours for the path picture
FLAT = 0.01         # a decade that gains less than this share of the loss gained so far ends the path
DECADES = 6         # the path never runs below 10^-6 of the zeroing strength


def path_end(task, index, runner, top: float, base: float, settings, opts) -> tuple[float, str]:
    """(the ratio end / top, why): from the data, not a fixed share.

    Fits one point per decade below the zeroing strength ``top`` and stops at the first decade
    whose fall in the training loss is at most ``FLAT`` (1%) of the fall from the top to it: the
    penalty no longer holds the fit back there, so weaker strengths only repeat the same model.
    Also stops where every coefficient the penalty acts on is non-zero and the last decade was
    under 10% of the fall, and at 10^-DECADES (6 decades) at the latest.
    """
    previous = base                  # the training loss at the top (penalised coefficients at zero)
    for k in range(1, DECADES + 1):
        runner.set_strength(top * 10.0 ** -k)
        fit = solve_task(task, settings, **opts)
        if not fit.status.has_point:
            return 10.0 ** -k, f"the fit at {k} decade(s) below the zeroing strength has no certified point"
        runner.start = fit.theta
        loss = _training_loss(runner.task, fit)
        fall, step = base - loss, previous - loss
        if fall > 0 and step <= FLAT * fall:
            return 10.0 ** -k, (f"the training loss fell by {step / fall:.2%} of its fall so far over the last "
                                f"decade ({k} below the zeroing strength): weaker strengths repeat the same model")
        if _all_moved(runner.task, index, fit) and fall > 0 and step <= 10 * FLAT * fall:
            return 10.0 ** -k, (f"every coefficient the penalty acts on is non-zero {k} decade(s) below the "
                                f"zeroing strength and the loss has levelled off")
        previous = loss
    return 10.0 ** -DECADES, f"reached {DECADES} decades below the zeroing strength (the lowest the path goes)"


def _all_moved(task, index, fit) -> bool:
    """Is every coefficient the penalty acts on non-zero at this fit?"""
    unit = task.penalties[index].with_strength(1.0)
    if not isinstance(unit, Separable):
        return False
    acts = unit.separable(task.features)[0] > 0
    w = fit.coef.to_numpy()[: acts.size]
    return bool(np.all(np.abs(w[acts]) > 1e-8 * max(1.0, float(np.max(np.abs(w), initial=0.0)))))


def _default_strengths(task, index, n: int, ratio, runner, settings, opts) -> tuple[np.ndarray, str]:
    """The default grid (from the zeroing strength down to ``ratio`` of it, or to the end read
    from the data when ``ratio`` is None) and why it ends there; leaves ``runner`` ready to start
    the path at its top."""
    # one fit far above the zeroing strength, on the same compiled problem
    scale = _strength_scale(task, index)
    for _ in range(3):
        runner.set_strength(scale)
        top_fit = solve_task(task, settings, **opts)
        if _all_zero(runner.task, index, top_fit) or _settled(top_fit):
            break
        scale *= 1e3
    else:
        raise ParameterError("No strength tried set the penalised coefficients to zero; "
                             "pass grid=[...] explicitly.")
    (top,), top_duals = default_grid(runner.task, index, top_fit, 1, None)
    if ratio is None and n > 1:
        ratio, stopped = path_end(task, index, runner, float(top), _training_loss(runner.task, top_fit),
                                  settings, opts)
    else:
        stopped = f"ends at {ratio:g} of the zeroing strength, as asked" if ratio and n > 1 else "one point"
    runner.start = top_fit.theta
    if top_duals is not None:
        # the first point's optimum is the restricted one just found (exactly zero where the
        # penalty acts): certified at the first strength with those duals, it is taken as it is
        start = np.asarray(top_fit.theta, float).copy()
        acts = runner.task.penalties[index].with_strength(1.0).separable(runner.task.features)[0] > 0
        start[: acts.size][acts] = 0.0
        runner.start = start
        runner.start_multipliers, runner.start_dual = top_duals
    # the solvers' last state is far from the grid's top: the next point starts cold
    runner.cold = True
    return top * np.geomspace(1.0, ratio or 1.0, n), stopped


def strengths(task, penalty=None, n: int = 20, *, ratio: float | None = None, route: str | None = None,
              solver: str | None = None, tol: float = 1e-9, gap_tol: float = 1e-7,
              feas_tol: float = 1e-6) -> tuple[np.ndarray, str]:
    """The default grid a path would walk for ``penalty`` (decreasing), and why it ends there."""
    task, index = _pick(task, penalty)
    runner = prepare(task.as_problem(), route, vary=index)
    return _default_strengths(task, index, int(n), ratio, runner, Settings(tol=tol, gap_tol=gap_tol,
                                                                          feas_tol=feas_tol),
                              dict(solver=solver, route=route, runner=runner))


def path(task, penalty=None, grid: Sequence[float] | None = None, n: int = 50, *, ratio: float | None = None,
         route: str | None = None, solver: str | None = None, tol: float = 1e-9, gap_tol: float = 1e-7,
         feas_tol: float = 1e-6, progress: bool | None = None) -> Path:
    params.check("path", n=(n, params.POSITIVE))
    if ratio is not None:
        params.check("path", ratio=(ratio, params.OPEN_UNIT))
    task, index = _pick(task, penalty)
    stopped = "the grid given"
    if grid is not None:
        grid = np.asarray(grid, float).ravel()
        if grid.size == 0 or not np.all(np.isfinite(grid)) or np.any(grid < 0):
            raise params.refusal("path", "grid", grid, "a non-empty list of finite strengths, each at least 0")
    runner = prepare(task.as_problem(), route, vary=index)
    settings = Settings(tol=tol, gap_tol=gap_tol, feas_tol=feas_tol)
    opts = dict(solver=solver, route=route, runner=runner)
    if grid is None:
        grid, stopped = _default_strengths(task, index, int(n), ratio, runner, settings, opts)
    grid = np.sort(grid)[::-1]
    fits, rows = [], []
    bar = ProgressBar(len(grid), "path", progress)
    try:
        for lam in grid:
            runner.set_strength(lam)
            fit = solve_task(task, settings, **opts)
            runner.start_multipliers = runner.start_dual = None
            if fit.status.has_point:
                runner.start = fit.theta
            fits.append(fit)
            w = fit.coef.to_numpy()
            cut = 1e-8 * max(1.0, float(np.max(np.abs(w), initial=0.0)))
            rows.append({"strength": float(lam), "status": fit.status.value, "objective": fit.objective,
                         "gap": fit.gap, "rel_gap": fit.rel_gap,
                         "training_loss": _training_loss(runner.task, fit) if np.all(np.isfinite(w)) else np.nan,
                         "nonzero": int(np.sum(np.abs(w) > cut)), "seconds": fit.timings.total})
            bar.step()
    finally:
        bar.close()
    table = pd.DataFrame(rows)
    coefs = pd.DataFrame([f.coef.to_numpy() for f in fits], index=pd.Index(grid, name="strength"),
                         columns=list(task.features))
    return Path(table, coefs, fits, task.penalties[index].with_strength(1.0), stopped)


def _strength_scale(task, index) -> float:
    """A strength well above the zeroing one: 1e3 x the gradient at theta = 0 over the smallest weight."""
    M, q, a = loss_argument(task)
    g = M.T @ (a * row_loss(task).gradient(-q))
    unit = task.penalties[index].with_strength(1.0)
    weight = 1.0
    if isinstance(unit, Separable):
        w1 = unit.separable(task.features)[0]
        weight = float(np.min(w1[w1 > 0])) if np.any(w1 > 0) else 1.0
    return 1e3 * (1.0 + float(np.max(np.abs(g)))) / weight


def _settled(fit) -> bool:
    """A certified fit at a huge strength where rules hold some coefficients away from zero."""
    return fit.status == Status.OPTIMAL and bool(fit.binding.any()) if len(fit.binding) else False


def _all_zero(task, index, fit) -> bool:
    """Are the coefficients penalty ``index`` acts on all (numerically) zero at this fit?"""
    if not fit.status.has_point:
        return False
    unit = task.penalties[index].with_strength(1.0)
    w = fit.coef.to_numpy()
    N = unit.null_space(task.features)      # directions the penalty does not act on
    moved = w - N @ (N.T @ w) if N.shape[1] else w
    return bool(np.max(np.abs(moved), initial=0.0) <= 1e-7 * max(1.0, float(np.max(np.abs(w), initial=0.0))))
