"""Absolute and quantile regression on many rows: solved on the rows near the answer, the
others gathered into two summary rows (the preprocessing of Portnoy and Koenker 1997, "The
Gaussian hare and the Laplacian tortoise", Statistical Science 12(4)).

At the answer, a row well below the fitted line contributes a loss linear in the coefficients,
and so does a row well above it; all such rows on one side add up to one row (their weighted
sum of features, their total weight) placed far enough out to stay on its side. learnopt fits a
random subsample (sqrt(p) n^(2/3) rows), keeps the rows whose residuals rank near the quantile,
gathers the rest into the two summary rows and solves that small task. If every gathered row
is still on its side at the new answer, the small task and the whole one share their answer;
rows that crossed over are moved back and the small task solved again. learnopt's certificate
then checks the answer on every row; without it, the whole task is solved as before.
"""
from __future__ import annotations

import math
import time
from dataclasses import replace

import numpy as np
import scipy.sparse as sp

from learnopt.data.table import Dataset
from learnopt.solve.loop import solve_task
from learnopt.solve.reduced import whole_task_fit

GLOB_ROWS = 10_000      # residual losses on more rows than this are gathered
ROUNDS = 6


def solve_fast(task, settings, **whole):
    """:func:`~learnopt.solve.loop.solve_task`, with absolute / quantile losses on many rows
    solved on the rows near the answer (certified on every row), else the whole task."""
    fit = _globbed(task, settings, whole)
    return fit if fit is not None else solve_task(task, settings, **whole)


def _eligible(task) -> bool:
    ds = task.dataset
    return (not task.sharded and task.kind == "regression" and task.loss.name in ("absolute", "quantile")
            and ds.n > GLOB_ROWS and not sp.issparse(ds.X) and ds.offset is None)


def _globbed(task, settings, whole):
    if not _eligible(task):
        return None
    t0 = time.perf_counter()
    # the small tasks go to the route the planner gives piecewise-linear losses on many rows
    whole = {**whole, "route": whole.get("route") or "working-set"}
    ds = task.dataset
    n, p = ds.n, ds.d + int(task.intercept)
    tau = float(getattr(task.loss, "tau", 0.5))
    m = int(min(n, max(2000, math.ceil(math.sqrt(p) * n ** (2.0 / 3.0)))))
    sample = np.sort(np.random.default_rng(0).choice(n, size=m, replace=False))
    first = solve_task(replace(task, dataset=_rows(ds, sample)), settings, **whole)
    if not first.status.has_point:
        return None
    theta, band = first.theta, m
    low = high = None
    for rounds in range(1, ROUNDS + 1):
        z = _residual(ds, theta, task.intercept)
        if low is None:
            low, high = _sides(z, tau, band)
        keep = ~(low | high)
        big = 1e3 * (1.0 + float(np.max(np.abs(z))))
        fit = solve_task(replace(task, dataset=_gathered(ds, keep, low, high, z, big)), settings, **whole)
        if not fit.status.has_point or fit.extras.get("multipliers") is None:
            return None
        theta = fit.theta
        z = _residual(ds, theta, task.intercept)
        crossed = (low & (z > 0)) | (high & (z < 0))
        if not crossed.any():
            return _whole_fit(task, fit, settings, int(keep.sum()), rounds, time.perf_counter() - t0)
        if crossed.sum() > 0.1 * band:             # the band was too narrow: widen it around the new answer
            band, low = min(n, 2 * band), None
        else:
            low, high = low & ~crossed, high & ~crossed
    return None


def _residual(ds, theta, intercept: bool) -> np.ndarray:
    d = ds.d
    return ds.X @ theta[:d] + (theta[d] if intercept else 0.0) - ds.y


def _sides(z, tau: float, band: int):
    """Rows surely below (z < lo) and surely above (z > hi) the answer: all but the ``band``
    rows whose residuals rank nearest the tau-quantile."""
    n = len(z)
    order = np.argsort(z, kind="stable")
    at = int(round((1.0 - tau) * n))         # at the answer about (1 - tau) n residuals are negative
    lo_rank, hi_rank = max(0, at - band // 2), min(n - 1, at + band // 2)
    low, high = np.zeros(n, bool), np.zeros(n, bool)
    low[order[:lo_rank]] = True
    high[order[hi_rank + 1:]] = True
    low &= z < 0                                   # a gathered row must be on its side now
    high &= z > 0
    return low, high


def _rows(ds, rows) -> Dataset:
    return Dataset(ds.X[rows], ds.y[rows], ds.weights[rows], ds.names, None, ds.encoding, ds.labels, [])


def _gathered(ds, keep, low, high, z, big: float) -> Dataset:
    """The kept rows, and one summary row per side: the side's weighted mean features, its total
    weight, and a target ``big`` beyond the fitted value so that it stays on its side."""
    X, y, w = [ds.X[keep]], [ds.y[keep]], [ds.weights[keep]]
    for side, sign in ((low, -1.0), (high, 1.0)):
        if side.any():
            weight = float(ds.weights[side].sum())
            x = (ds.weights[side] @ ds.X[side]) / weight
            fitted = float(ds.weights[side] @ (z[side] + ds.y[side])) / weight       # mean prediction
            X.append(x[None, :])
            y.append(np.array([fitted - sign * big]))
            w.append(np.array([weight]))
    return Dataset(np.vstack(X), np.concatenate(y), np.concatenate(w), ds.names, None, ds.encoding, ds.labels, [])


def _whole_fit(task, fit, settings, kept, rounds, seconds):
    """The gathered task's answer as the whole task's fit (None unless certified on every row)."""
    how = (f"Solved on the {kept} rows nearest the answer with the other {task.dataset.n - kept} gathered into "
           f"two summary rows ({rounds} round{'s' * (rounds > 1)})")
    return whole_task_fit(task, fit, fit.extras["multipliers"], settings, how,
                          {"gathered": {"kept": kept, "rows": task.dataset.n, "rounds": rounds}}, seconds)
