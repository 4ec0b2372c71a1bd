"""The report's picture of each shaped feature (``task.shape``): the fitted effect against the
feature, knots marked, with the training rows' partial residuals (regression: the target minus
every other part of the prediction) or, for classification, a rug of the training values."""
from __future__ import annotations

import html as _html

import numpy as np

from learnopt.interface.report_blocks import figure, png
from learnopt.interface.report_pictures import BAD, GOOD, GREY, MAX_POINTS, has_point
from learnopt.rules.shapes import Shape


def shape_points(task, fit, feature: str):
    """(x, partial residual or None) of the training rows (a seeded sample), or None without rows."""
    if task.sharded or task.dataset.frame is None or not len(task.dataset.y):
        return None
    b = task.dataset.encoding.shapes[feature]
    x = task.dataset.frame[feature].to_numpy(dtype=float)
    keep = np.arange(len(x))
    if len(x) > MAX_POINTS:
        keep = np.random.default_rng(0).choice(len(x), MAX_POINTS, replace=False)
    if task.kind != "regression":
        return x[keep], None
    pred = np.asarray(task.dataset.X @ fit.coef.to_numpy(), dtype=float).ravel() + fit.intercept
    effect = b.columns(x) @ fit.coef[list(b.names)].to_numpy()
    return x[keep], (np.asarray(task.dataset.y, dtype=float) - pred + effect)[keep]


def draw_shape(ax, table, points, feature: str) -> None:
    if points is not None and points[1] is not None:
        ax.scatter(points[0], points[1], s=7, alpha=0.35, color=GREY, linewidths=0, label="partial residuals")
    ax.plot(table["feature"], table["effect"], color=GOOD, lw=2.2, label="fitted effect")
    knots = table[table["knot"]]
    ax.plot(knots["feature"], knots["effect"], "o", color=BAD, ms=4, label="knots")
    if points is not None and points[1] is None:
        ax.plot(points[0], np.full(len(points[0]), ax.get_ylim()[0]), "|", color=GREY, ms=8, alpha=0.4,
                label="training values")
    ax.set_xlabel(feature)
    ax.set_ylabel("effect on the score" if points is not None and points[1] is None else "effect")
    ax.legend(loc="best", fontsize=8)


def shape_parts(job) -> list[str]:
    """One figure per shaped feature of the fit."""
    fit, task = job.fit, job.task
    if not has_point(fit):
        return []
    out = []
    for spec in (r for r in task.rules if isinstance(r, Shape)):
        table = fit.shape_table(spec.feature)
        points = shape_points(task, fit, spec.feature)
        b = task.dataset.encoding.shapes[spec.feature]
        form = (f"a piecewise-linear spline with {len(b.knots)} knots" if b.form == "lines"
                else f"steps at {len(b.knots)} knots")
        shown = ("Grey points: each training row's target minus the rest of its prediction (partial residuals)."
                 if points is not None and points[1] is not None else
                 "Ticks at the bottom: the training values." if points is not None else "")
        out.append(figure(f"Shaped effect of {spec.feature}", png(
            lambda ax, t=table, p=points, f=spec.feature: draw_shape(ax, t, p, f), size=(6.0, 3.8),
            alt=f"fitted effect of {spec.feature}"),
            f"Imposed: <b>{_html.escape(' and '.join(spec.words))}</b> ({form}, at quantiles of the training "
            f"values; red dots). The effect leaves out the intercept and the other features. {shown}"))
    return out
