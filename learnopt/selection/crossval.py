"""Cross-validation of one penalty's strength.

The rows are split into folds (random with a seed, by groups, or in time order); each training
part walks the same grid as a path (compiled once per fold, warm-started) with every
requirement, and the held-out part is scored with a metric (default: the task's own loss).
The two choices: ``top``, the strength with the best mean held-out score (the lowest error, or
the highest accuracy), and ``within_one_se``, the largest strength whose mean is within one
standard error of the top (the one-standard-error rule, Breiman et al. 1984: the simpler model
the data cannot tell apart). ``best`` and ``best_1se``, the names before this release, still
work and warn.
"""
from __future__ import annotations

import warnings
from dataclasses import dataclass, replace
from typing import Callable

import numpy as np
import pandas as pd

from learnopt.core.status import Status
from learnopt.core import checks as params
from learnopt.core.errors import DataError, ParameterError
from learnopt.data.table import take_rows
from learnopt.core.progress import ProgressBar
from learnopt.selection.paths import _pick, _pyplot, path, strengths


# ---------------------------------------------------------------- cross-validation
def fold_rows(n: int, folds: int, *, seed: int = 0, groups=None, ordered: bool = False):
    """(train rows, held-out rows) per fold.

    random (default): ``numpy.random.default_rng(seed).permutation(n)`` cut by ``numpy.array_split``
    into ``folds`` parts, each held out once. groups: the distinct groups are permuted the same
    way and dealt to the folds in turn, so a group is never split. ordered (time-ordered rows):
    the rows are cut into ``folds + 1`` consecutive blocks; fold k trains on blocks 0..k-1 and
    holds out block k (forward chaining: no fold trains on rows after the ones it predicts).
    """
    if ordered:
        blocks = np.array_split(np.arange(n), folds + 1)
        return [(np.concatenate(blocks[:k]), blocks[k]) for k in range(1, folds + 1)]
    rng = np.random.default_rng(seed)
    if groups is not None:
        groups = np.asarray(groups)
        uniq = np.unique(groups)
        if len(uniq) < folds:
            raise DataError(f"{len(uniq)} groups cannot fill {folds} folds; use folds <= {len(uniq)}.")
        dealt = rng.permutation(uniq)
        member = {g: k % folds for k, g in enumerate(dealt.tolist())}
        fold_of = np.array([member[g] for g in groups.tolist()])
        tests = [np.flatnonzero(fold_of == k) for k in range(folds)]
    else:
        tests = np.array_split(rng.permutation(n), folds)
    every = np.arange(n)
    return [(np.setdiff1d(every, t), np.sort(t)) for t in tests]


_LOWER_IS_BETTER = {"loss", "mse", "mae", "pinball", "zero_one", "hinge", "log_loss"}


def metric_function(task, metric) -> tuple[str, Callable, bool]:
    """(name, fn(y, score, weights) -> float, higher_is_better). y: targets (+1/-1 for classes)."""
    import re
    if metric is None or metric == "loss":
        loss = task.loss
        if loss.argument == "margin":
            return "loss", lambda y, s, w: float(np.average(loss.value(y * s), weights=w)), False
        if loss.argument == "linear":       # scores are linear predictors, the targets bound per row
            return "loss", lambda y, s, w: float(np.average(loss.given(y).value(s), weights=w)), False
        return "loss", lambda y, s, w: float(np.average(loss.value(s - y), weights=w)), False
    if callable(metric):
        name = getattr(metric, "__name__", "metric")
        return name, lambda y, s, w: float(metric(y, s)), bool(getattr(metric, "higher_is_better", False))
    text = str(metric).strip().lower().replace("-", "_").replace(" ", "_")
    classify = task.kind == "classification"
    simple = {
        "mse": lambda y, s, w: float(np.average((s - y) ** 2, weights=w)),
        "mae": lambda y, s, w: float(np.average(np.abs(s - y), weights=w)),
        "accuracy": lambda y, s, w: float(np.average(np.where(s > 0, 1.0, -1.0) == y, weights=w)),
        "zero_one": lambda y, s, w: float(np.average(np.where(s > 0, 1.0, -1.0) != y, weights=w)),
        "hinge": lambda y, s, w: float(np.average(np.maximum(0.0, 1.0 - y * s), weights=w)),
        "log_loss": lambda y, s, w: float(np.average(np.logaddexp(0.0, -y * s), weights=w)),
    }
    needs_classes = {"accuracy", "zero_one", "hinge", "log_loss"}
    m = re.fullmatch(r"pinball\(\s*([0-9.eE+-]+)\s*\)", text)
    if m:
        tau = float(m.group(1))
        if not 0.0 < tau < 1.0:
            raise params.refusal("cross_validate", "metric", metric, "pinball(tau) with tau between 0 and 1")
        return (f"pinball({tau:g})", lambda y, s, w: float(np.average(
            np.maximum(tau * (y - s), (tau - 1.0) * (y - s)), weights=w)), False)
    if text not in simple:
        raise params.refusal("cross_validate", "metric", metric, "one of loss, mse, mae, pinball(tau), accuracy, "
                                                                 "zero_one, hinge, log_loss, or a callable "
                                                                 "f(y_true, score)")
    if (text in needs_classes) != classify:
        kind = "classification" if text in needs_classes else "regression"
        raise ParameterError(f"The {text} metric is for {kind} tasks; this task is a {task.kind}.")
    if task.loss.link == "log":            # mse, mae, pinball: on the mean exp(score)
        plain = simple[text]
        return text, lambda y, s, w: plain(y, np.exp(s), w), False
    return text, simple[text], text == "accuracy"


@dataclass(repr=False)
class CrossValidation:
    """Held-out scores over a grid of strengths.

    Attributes
    ----------
    table : DataFrame, one row per strength (decreasing, as on a path): strength, mean and standard error (std
        over folds / sqrt(folds)) of the held-out metric, the number of certified fold fits, and
        the mean number of non-zero coefficients over the fold fits.
    scores : DataFrame, strengths x folds, the held-out metric of each fold fit.
    top : the strength with the best mean held-out score.
    within_one_se : the largest strength whose mean is within one standard error of the top.
    metric : the metric's name; higher_is_better : its direction.
    """

    table: pd.DataFrame
    scores: pd.DataFrame
    top: float
    within_one_se: float
    metric: str
    higher_is_better: bool

    def __repr__(self) -> str:
        return (f"CrossValidation({self.scores.shape[1]} folds, {len(self.table)} strengths, metric {self.metric}; "
                f"top {self.top:.4g}, within_one_se {self.within_one_se:.4g})")

    @property
    def best(self) -> float:
        """The name of :attr:`top` before this release (still works, warns)."""
        warnings.warn("cv.best is now cv.top; the old name will be removed in the next release.",
                      DeprecationWarning, stacklevel=2)
        return self.top

    @property
    def best_1se(self) -> float:
        """The name of :attr:`within_one_se` before this release (still works, warns)."""
        warnings.warn("cv.best_1se is now cv.within_one_se; the old name will be removed in the next release.",
                      DeprecationWarning, stacklevel=2)
        return self.within_one_se

    def plot(self, ax=None):
        """The held-out score against strength, increasing left to right (log scale): the mean as
        a line in a shaded band of plus/minus one standard error, the two choices as labelled
        markers and, when no ``ax`` is given, the mean non-zero count in a small panel underneath.
        Returns the main axes (matplotlib)."""
        plt = _pyplot()
        counts = None
        if ax is None:
            fig, (ax, counts) = plt.subplots(2, 1, figsize=(7, 4.6), sharex=True,
                                             gridspec_kw={"height_ratios": [3, 1], "hspace": 0.08})
        t = self.table
        ax.fill_between(t["strength"], t["mean"] - t["se"], t["mean"] + t["se"], color="#9cc9b4", alpha=0.45,
                        lw=0, label="mean \u00b1 one standard error")
        ax.plot(t["strength"], t["mean"], color="#1f6f50", lw=1.6)
        for value, name, colour, dx, side in ((self.top, "top score", "#c0392b", -8, "right"),
                                              (self.within_one_se, "within one se", "#2c3e91", 8, "left")):
            y = float(t.loc[t["strength"] == value, "mean"].iloc[0])
            ax.plot([value], [y], marker="D", ms=7, color=colour, zorder=3)
            ax.annotate(f"{name}\n{value:.3g}", (value, y), xytext=(dx, 14), textcoords="offset points",
                        ha=side, va="bottom", fontsize=8, color=colour)
        ax.set_xscale("log")
        ax.set_ylabel(f"held-out {self.metric}")
        ax.legend(fontsize="small", loc="best", frameon=False)
        ax.spines[["top", "right"]].set_visible(False)
        if counts is not None:
            counts.step(t["strength"], t["nonzero"], where="mid", color="#555")
            counts.set_ylabel("non-zero", fontsize=8)
            counts.set_xlabel("penalty strength")
            counts.spines[["top", "right"]].set_visible(False)
        else:
            ax.set_xlabel("penalty strength")
        return ax


def cross_validate(task, folds: int = 5, grid=None, metric=None, seed: int = 0, groups=None, *,
                   ordered: bool = False, penalty=None, n: int = 20, ratio: float | None = None,
                   route: str | None = None, solver: str | None = None, tol: float = 1e-9,
                   gap_tol: float = 1e-7, feas_tol: float = 1e-6,
                   progress: bool | None = None) -> CrossValidation:
    params.check("cross_validate", folds=(folds, params.Interval(2, None)))
    if int(folds) != folds:
        raise params.refusal("cross_validate", "folds", folds, "a whole number, at least 2")
    task, index = _pick(task, penalty)
    name, score, higher = metric_function(task, metric)
    ds = task.dataset
    if groups is not None and isinstance(groups, str):
        if ds.frame is None or groups not in ds.frame.columns:
            raise DataError(f"groups={groups!r} is not a column of the data.")
        groups = ds.frame[groups].to_numpy()
    if groups is not None and len(groups) != ds.n:
        raise DataError(f"groups has {len(groups)} entries for {ds.n} rows.")
    if folds + ordered > ds.n:
        raise params.refusal("cross_validate", "folds", folds, f"at most {ds.n - ordered}: the task has {ds.n} "
                             f"rows, and every fold needs rows to hold out{' and rows to train on' if ordered else ''}")
    splits = fold_rows(ds.n, int(folds), seed=seed, groups=groups, ordered=ordered)
    if grid is None:
        grid = strengths(task, index, int(n), ratio=ratio, route=route, solver=solver, tol=tol, gap_tol=gap_tol,
                         feas_tol=feas_tol)[0]
    grid = np.sort(np.asarray(grid, float).ravel())[::-1]
    table = np.full((len(grid), len(splits)), np.nan)
    nonzero = np.zeros(len(grid))
    certified = np.zeros(len(grid), int)
    bar = ProgressBar(len(splits), "cross-validation", progress)
    try:
        for k, (train, held) in enumerate(splits):
            sub = replace(task, dataset=take_rows(ds, train))
            walk = path(sub, index, grid, route=route, solver=solver, tol=tol, gap_tol=gap_tol,
                        feas_tol=feas_tol, progress=False)
            X, y, w = ds.X[held], ds.y[held], ds.weights[held]
            nonzero += walk.table["nonzero"].to_numpy() / len(splits)
            for j, fit in enumerate(walk.fits):
                if not np.all(np.isfinite(fit.coef.to_numpy())):
                    continue
                s = np.asarray(X @ fit.coef.to_numpy()).ravel() + fit.intercept
                if ds.offset is not None:
                    s = s + ds.offset[held]
                table[j, k] = score(y, s, w)
                certified[j] += fit.status == Status.OPTIMAL
            bar.step()
    finally:
        bar.close()
    mean = np.nanmean(table, axis=1)
    counts = np.sum(np.isfinite(table), axis=1)
    se = np.nanstd(table, axis=1, ddof=1) / np.sqrt(np.maximum(counts, 1))
    out = pd.DataFrame({"strength": grid, "mean": mean, "se": se, "certified_folds": certified,
                        "nonzero": nonzero})
    signed = -mean if higher else mean
    b = int(np.nanargmin(signed))
    within = np.flatnonzero(signed <= signed[b] + se[b])
    scores = pd.DataFrame(table, index=pd.Index(grid, name="strength"),
                          columns=[f"fold {k}" for k in range(len(splits))])
    return CrossValidation(out, scores, float(grid[b]), float(grid[within].max()), name, higher)
