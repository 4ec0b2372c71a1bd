"""The pictures of a fit's report, each drawn only where it applies: coefficients with their
simple bounds, group means under a rule on means, predicted against actual (regression),
margins (classification), quantile coverage, and the path. Each ``*_data`` function gathers the
numbers (None when the picture does not apply); each ``draw_*`` draws them on a matplotlib axis."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import pandas as pd

from learnopt.core.errors import LearnoptError
from learnopt.problem.algebra import loss_argument
from learnopt.scale.passes import argument_histogram

BOUND_TOL = 1e-6        # a coefficient this close (relative) to its bound sits on it
MAX_POINTS = 4000       # predicted-against-actual shows at most this many rows (a seeded sample)
GOOD, BAD, GREY = "#2f6f9f", "#b8432f", "#888888"


def has_point(fit) -> bool:
    return fit is not None and np.all(np.isfinite(fit.coef.to_numpy()))


# ------------------------------------------------------------------ coefficients and bounds
def simple_bounds(task, fit) -> pd.DataFrame:
    """Bounds on single coefficients read from the rules (every requirement row with a single
    non-zero entry): columns lower, upper, lower_binding, upper_binding, one row per
    coefficient name (NaN / False where the rules set no bound)."""
    names = list(task.coefficient_names)
    out = pd.DataFrame({"lower": np.nan, "upper": np.nan, "lower_binding": False, "upper_binding": False},
                       index=pd.Index(names, name="name"))
    theta = fit.theta if has_point(fit) else None
    held = fit.rule_standing()["holds_back"] if len(getattr(fit, "prices", ())) else pd.Series(dtype=bool)
    for q in task.requirements:
        if q.sense not in ("<=", "=="):
            continue
        A = q.A.toarray() if hasattr(q.A, "toarray") else np.asarray(q.A, dtype=float)
        for i in np.flatnonzero(np.count_nonzero(A, axis=1) == 1):
            j = int(np.flatnonzero(A[i])[0])
            _bound(out, names[j], q.sense, float(A[i, j]), float(q.rhs[i]),
                   bool(held.get(q.source, False)) and theta is not None, None if theta is None else theta[j])
    return out


def _bound(out: pd.DataFrame, name: str, sense: str, a: float, rhs: float, holds: bool, at) -> None:
    """Record the bound ``a * coefficient (sense) rhs`` on ``name``; binding when its rule holds the
    fit back and the coefficient sits on it."""
    value = rhs / a
    binding = holds and abs(at - value) <= BOUND_TOL * max(1.0, abs(value))
    for side in ("lower", "upper") if sense == "==" else (("upper",) if a > 0 else ("lower",)):
        old = out.at[name, side]
        if np.isnan(old) or (value < old if side == "upper" else value > old):
            out.at[name, side] = value
        out.at[name, f"{side}_binding"] = bool(out.at[name, f"{side}_binding"]) or binding


def draw_coefficients(ax, coef: pd.Series, bounds: pd.DataFrame, spread: pd.DataFrame | None = None) -> None:
    """Horizontal bars, first coefficient on top; each bound a tick across its bar (red and
    solid when the coefficient sits on it and the rule holds the fit back). ``spread``: refit
    intervals (low, high, flagged) drawn as black whiskers, dotted where flagged."""
    names = list(coef.index)
    y = np.arange(len(names))[::-1]
    ax.barh(y, coef.to_numpy(), color=GOOD, height=0.6)
    if spread is not None:
        for yi, name in zip(y, names):
            if name not in spread.index or not np.isfinite(spread.at[name, "low"]):
                continue
            lo, hi, odd = spread.at[name, "low"], spread.at[name, "high"], bool(spread.at[name, "flagged"])
            ax.plot([lo, hi], [yi, yi], color="#111", lw=1.4, ls=":" if odd else "-",
                    label="refit interval" + (" (on an edge: not normal theory)" if odd else ""))
            ax.plot([lo, hi], [yi, yi], "|", color="#111", ms=9)
    ax.axvline(0, color="#444", lw=0.8)
    drawn = set()
    for yi, name in zip(y, names):
        for side in ("lower", "upper"):
            v = bounds.at[name, side] if name in bounds.index else np.nan
            if np.isnan(v):
                continue
            bind = bool(bounds.at[name, f"{side}_binding"])
            label = "bound, binding" if bind else "bound from a rule"
            ax.plot([v, v], [yi - 0.42, yi + 0.42], color=BAD if bind else GREY, lw=3 if bind else 1.6,
                    ls="-" if bind else "--", label=None if label in drawn else label)
            drawn.add(label)
    handles, labels = ax.get_legend_handles_labels()
    drawn |= set(labels)
    ax.set_yticks(y, [str(n) for n in names])
    ax.set_xlabel("coefficient")
    if drawn:
        keep = dict(zip(labels, handles))
        ax.legend(keep.values(), keep.keys(), loc="best", fontsize=8, framealpha=0.85)


# ------------------------------------------------------------------ rules on means
@dataclass(frozen=True)
class MeanRule:
    """A rule on group means: each group's mean prediction (the ``mean(...)`` terms as written)
    and, holding the other groups at theirs, the limit the rule puts on it."""

    rule: str
    terms: tuple[str, ...]
    means: tuple[float, ...]
    lower: tuple[float, ...]
    upper: tuple[float, ...]
    holds_back: bool


def mean_terms(text: str) -> list[str]:
    """The ``mean(...)`` terms of a rule, brackets balanced."""
    out, at = [], text.find("mean(")
    while at >= 0:
        depth, k = 0, at + 4
        for k in range(at + 4, len(text)):
            depth += {"(": 1, ")": -1}.get(text[k], 0)
            if depth == 0:
                break
        out.append(text[at:k + 1])
        at = text.find("mean(", k + 1)
    return out


def mean_rules(task, fit) -> list[MeanRule]:
    """Every rule on means whose terms can be read one by one (in-memory data only)."""
    if task.sharded or not has_point(fit):
        return []
    theta = fit.theta
    held = fit.rule_standing()["holds_back"] if len(fit.prices) else pd.Series(dtype=bool)
    out = []
    for text in dict.fromkeys(r.source for r in task.requirements if "mean(" in r.source):
        terms = mean_terms(text)
        try:
            rows = np.array([task.require(f"{t} <= 0").requirements[-1].A[0] for t in terms], dtype=float)
        except (LearnoptError, IndexError):
            continue
        means = rows @ theta
        lower, upper = np.full(len(terms), np.nan), np.full(len(terms), np.nan)
        for q in (q for q in task.requirements if q.source == text and q.rows == 1 and q.sense != "norm"):
            a = np.asarray(q.A[0], dtype=float)
            c, *_ = np.linalg.lstsq(rows.T, a, rcond=None)
            if not np.allclose(rows.T @ c, a, atol=1e-9 * max(1.0, np.abs(a).max())):
                continue                      # not a combination of the means alone: no limits shown
            for k, ck in enumerate(c):
                if abs(ck) < 1e-12:
                    continue
                limit = (float(q.rhs[0]) - (c @ means - ck * means[k])) / ck
                if q.sense == "==" or ck > 0:
                    upper[k] = limit if np.isnan(upper[k]) else min(upper[k], limit)
                if q.sense == "==" or ck < 0:
                    lower[k] = limit if np.isnan(lower[k]) else max(lower[k], limit)
        out.append(MeanRule(text, tuple(terms), tuple(means), tuple(lower), tuple(upper),
                            bool(held.get(text, False))))
    return out


def draw_means(ax, m: MeanRule, what: str) -> None:
    y = np.arange(len(m.terms))[::-1]
    ax.barh(y, m.means, color=GOOD, height=0.55)
    for yi, lo_, hi in zip(y, m.lower, m.upper):
        for v, word in ((lo_, "lowest"), (hi, "highest")):
            if np.isfinite(v):
                ax.plot([v, v], [yi - 0.4, yi + 0.4], color=BAD if m.holds_back else GREY, lw=2.5)
                ax.annotate(f"{word} allowed {v:.4g}", (v, yi + 0.42), fontsize=8, ha="center", va="bottom")
    for yi, v in zip(y, m.means):
        ax.annotate(f"{v:.4g}", (v, yi), xytext=(-4, 0), textcoords="offset points", fontsize=8, va="center",
                    ha="right", color="white", weight="bold")
    ax.set_yticks(y, [_short(t) for t in m.terms])
    ax.set_xlabel(f"mean {what} (limits hold the other groups at their means)")
    ax.margins(y=0.25)


def _short(text: str, width: int = 38) -> str:
    inner = text[5:-1] if text.startswith("mean(") else text
    inner = inner.replace("prediction where ", "")
    return inner if len(inner) <= width else inner[:width - 1] + "\u2026"


# ------------------------------------------------------------------ fit pictures
def predicted_actual(task, fit):
    """(actual, predicted) on the training rows, regression in memory; else None."""
    if task.kind != "regression" or task.sharded or not has_point(fit):
        return None
    pred = training_prediction(task, fit.theta)
    y = np.asarray(task.dataset.y, dtype=float)
    if len(y) > MAX_POINTS:
        keep = np.random.default_rng(0).choice(len(y), MAX_POINTS, replace=False)
        y, pred = y[keep], pred[keep]
    return y, pred


def draw_predicted_actual(ax, y, pred, target: str) -> None:
    ax.scatter(y, pred, s=8, alpha=0.45, color=GOOD, linewidths=0)
    lo_, hi = float(min(y.min(), pred.min())), float(max(y.max(), pred.max()))
    ax.plot([lo_, hi], [lo_, hi], color=BAD, lw=1, label="predicted = actual")
    ax.set_xlabel(f"actual {target}")
    ax.set_ylabel("predicted")
    ax.legend(loc="upper left", fontsize=8)
    ax.set_aspect("equal", adjustable="datalim")


def training_prediction(task, theta) -> np.ndarray:
    """Predictions on the training rows in memory: x'w + b + offset, and its exp for log-link losses."""
    M, q, _ = loss_argument(task)
    eta = M @ theta - q + (task.dataset.y if task.loss.argument == "residual" else 0.0)
    return np.exp(eta) if task.loss.link == "log" else eta


def argument_counts(task, theta, bins: int = 40):
    """Histogram of the loss argument on the training rows (by passes for sharded data); for the
    log-link losses, of the residual mean - target (in memory only: None on sharded data)."""
    if task.sharded:
        if task.loss.argument == "linear":
            return None
        return argument_histogram(task.dataset, theta, task.intercept, task.loss.argument == "margin", bins)
    if task.loss.argument == "linear":
        return np.histogram(training_prediction(task, theta) - task.dataset.y, bins=bins)
    M, q, _ = loss_argument(task)
    return np.histogram(M @ theta - q, bins=bins)


def draw_histogram(ax, counts, edges, label: str, margins: bool) -> None:
    ax.stairs(counts, edges, fill=True, color="#4a7")
    if margins:
        ax.axvline(0, color=BAD, lw=1.5, label="margin 0: the decision boundary")
        ax.axvline(1, color="#333", lw=1.2, ls="--", label="margin 1: clear of the boundary")
        ax.legend(loc="upper left", fontsize=8)
    ax.set_xlabel(label)
    ax.set_ylabel("rows")


def coverage(task, fit, held):
    """Share of rows at or under the predicted quantile, by predicted level (up to 8 groups of
    equal size), for a quantile fit: (levels, shares, counts, overall, tau, where) or None.
    On the held-out rows when there are any in memory, else on the training rows."""
    tau = getattr(task.loss, "tau", None)
    if task.loss.name != "quantile" or tau is None or not has_point(fit):
        return None
    if isinstance(held, pd.DataFrame) and len(held):
        y, pred, where = held[task.target_name].to_numpy(dtype=float), np.asarray(fit.decision(held), float), "held-out"
    elif not task.sharded:
        pred = np.asarray(task.dataset.X @ fit.coef.to_numpy(), dtype=float).ravel() + fit.intercept
        y, where = np.asarray(task.dataset.y, dtype=float), "training"
    else:
        return None
    order = np.argsort(pred, kind="stable")
    groups = np.array_split(order, min(8, max(1, len(order) // 20)))
    levels = [float(np.median(pred[g])) for g in groups]
    shares = [float(np.mean(y[g] <= pred[g])) for g in groups]
    return levels, shares, [len(g) for g in groups], float(np.mean(y <= pred)), float(tau), where


def draw_coverage(ax, levels, shares, counts, overall, tau, where) -> None:
    x = np.arange(len(levels))
    ax.bar(x, shares, color=GOOD, width=0.7)
    ax.axhline(tau, color=BAD, lw=1.5, label=f"tau = {tau:g}")
    ax.axhline(overall, color="#333", lw=1, ls="--", label=f"all {where} rows: {overall:.3g}")
    ax.set_xticks(x, [f"{v:.4g}\n({n} rows)" for v, n in zip(levels, counts)], fontsize=7)
    ax.set_ylim(0, 1.3)
    ax.set_xlabel("predicted level (median of each group, lowest first)")
    ax.set_ylabel("share at or under the prediction")
    ax.legend(loc="upper center", fontsize=8, ncol=2)


def path_strength(job):
    """The strength the recipe's fit used, on the path's axis (None without a path)."""
    if job.path is None or not job.task.penalties:
        return None
    index = min(job.recipe.do.penalty, len(job.task.penalties) - 1)
    return float(getattr(job.task.penalties[index], "strength", np.nan))


def draw_path(ax, path, chosen) -> None:
    path.plot(ax=ax)
    if chosen is not None and np.isfinite(chosen) and chosen > 0:
        ax.axvline(chosen, color=BAD, lw=1.5, ls="--")
        ax.annotate(f"the fit: {chosen:.4g}", (chosen, 1.0), xycoords=("data", "axes fraction"), xytext=(3, -12),
                    textcoords="offset points", fontsize=8, color=BAD)
