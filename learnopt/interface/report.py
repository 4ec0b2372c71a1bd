"""A self-contained HTML report of a recipe run: provenance first, then the answer with its
pictures (inlined PNG when matplotlib is installed), the evidence and the tables."""
from __future__ import annotations

import html as _html

import numpy as np
import pandas as pd

from learnopt.core.status import CAUTION, PLACEMENT_CAUTION
from learnopt.interface.provenance import provenance, provenance_html
from learnopt.interface.report_shapes import shape_parts
from learnopt.interface.report_classes import classes_html
from learnopt.interface.report_sure import group_fit_parts, group_picture, interval_parts, refit_parts
from learnopt.interface.report_blocks import figure, fmt, page, png, standing, table
from learnopt.interface.report_pictures import (
    argument_counts, coverage, draw_coefficients, draw_coverage, draw_histogram, draw_means, draw_path,
    draw_predicted_actual, has_point, mean_rules, path_strength, predicted_actual, simple_bounds)
from learnopt.rules.regions import Ball, Polygon, Segment
from learnopt.solve.classes_fit import ClassesFit

COMPARE_COLUMNS = ("status", "objective", "gap", "violation", "steps", "total_s", "max_coef_diff")


def _maths(task) -> str:
    f = task.loss.describe()
    arg = {"margin": "y_i (x_i'w + b)", "linear": "x_i'w + b + offset_i; y_i"}.get(task.loss.argument,
                                                                                 "x_i'w + b - y_i")
    pens = " + ".join(p.describe() for p in task.penalties) or "0"
    return (f"minimise over w{', b' if task.intercept else ''}: &Sigma;<sub>i</sub> a<sub>i</sub> "
            f"{_html.escape(f)}({arg}) + {_html.escape(pens)} subject to the rules below, "
            f"with row weights a<sub>i</sub> summing to one (the weighted mean loss).")


def _map(ax, fit, task) -> None:
    """Points coloured by their centre, the areas' outlines, centres (fixed ones as squares)."""
    x, y = task.names[:2]
    if len(task.X):
        ax.scatter(task.X[:, 0], task.X[:, 1], c=np.asarray(fit.labels) % 10, cmap="tab10", vmin=0, vmax=9,
                   s=6, alpha=0.35, linewidths=0)
    for p in task.rules:
        spec = p.spec
        if isinstance(spec, Polygon) and tuple(spec.features) == (x, y):
            V = np.asarray(spec.vertices + spec.vertices[:1])
            ax.plot(V[:, 0], V[:, 1], color="#555", lw=1.2)
        elif isinstance(spec, Segment) and tuple(spec.features) == (x, y):
            ax.plot([spec.start[0], spec.end[0]], [spec.start[1], spec.end[1]], color="#36c", lw=2.5, alpha=0.6)
        elif isinstance(spec, Ball) and tuple(spec.features) == (x, y):
            t = np.linspace(0, 2 * np.pi, 200)
            ax.plot(spec.centre[0] + spec.radius * np.cos(t), spec.centre[1] + spec.radius * np.sin(t),
                    color="#555", lw=1.2, ls="--")
    C = fit.centres.to_numpy()
    fixed = np.arange(len(C)) < len(task.fixed)
    ax.scatter(C[~fixed, 0], C[~fixed, 1], marker="o", s=90, facecolor="white", edgecolor="black", lw=2, zorder=3,
               label="placed centre")
    if fixed.any():
        ax.scatter(C[fixed, 0], C[fixed, 1], marker="s", s=90, facecolor="black", zorder=3, label="fixed centre")
    ax.legend(loc="best", fontsize=8, framealpha=0.8)
    for j, (cx, cy) in enumerate(C[:, :2], start=1):
        ax.annotate(str(j), (cx, cy), xytext=(7, 7), textcoords="offset points", fontsize=9, weight="bold")
    ax.set_xlabel(x)
    ax.set_ylabel(y)
    ax.set_aspect("equal", adjustable="datalim")


def centres_html(job) -> str:
    """The report of a centres recipe: provenance, rules, the verdict, evidence, centres and
    loads, a map."""
    fit, task, recipe = job.fit, job.task, job.recipe
    title = recipe.title or "learnopt centres"
    n = "sharded points" if task.source is not None else f"{len(task.X)} points"
    parts = [f"<h1>{_html.escape(title)}</h1>", provenance_html(provenance(job)),
             f"<p>{n}, {len(task.names)} coordinates ({_html.escape(', '.join(task.names))}); {task.k} centres, "
             f"{len(task.fixed)} of them fixed. Objective: the weighted sum of squared distances from each point "
             f"to its nearest centre.</p>"]
    if task.rules:
        parts.append("<h2>Rules</h2><ul>" + "".join(
            f"<li><code>{_html.escape(p.spec.text)}</code> on "
            f"{'every centre' if p.centre is None else f'centre {p.centre}'}</li>" for p in task.rules) + "</ul>")
    verdict = task.check()
    parts.append("<h2>What was solved</h2><ul>" + "".join(f"<li>{_html.escape(a)}: {_html.escape(b)}</li>"
                                                          for a, b in verdict.pieces) + "</ul>")
    ev = pd.DataFrame({"value": [fit.status, fit.message, fit.objective, fit.violation, len(fit.restarts),
                                 fit.iterations, fit.seconds]},
                      index=pd.Index(["status", "message", "objective", "worst violation (absolute)", "restarts",
                                      "steps (best restart)", "seconds"], name="evidence"))
    parts.append("<h2>Evidence</h2>" + table(ev))
    parts.append("<h2>Centres</h2>" + table(fit.centres.join(fit.loads)))
    if len(task.names) >= 2:
        parts.append("<h2>Map</h2>" + png(lambda ax: _map(ax, fit, task), size=(6.5, 5.0), alt="map of the centres"))
    parts.append("<h2>Restarts</h2>" + table(fit.restarts))
    if job.evaluation is not None:
        parts.append("<h2>Held-out points</h2>" + table(job.evaluation.to_frame("value")))
    parts.append(f"<p class=\"note\">{_html.escape(PLACEMENT_CAUTION)}</p>")
    return page(title, parts)


def _coefficients(task, fit, boot=None) -> list[str]:
    """The coefficient chart (bounds from the rules drawn on it, refit intervals as whiskers when
    there are refits) and the table beside it."""
    coefs = fit.coefficients()
    bounds = simple_bounds(task, fit) if has_point(fit) else None
    out = ["<h2>Coefficients</h2>"]
    if bounds is not None:
        shown = fit.coef
        note = " The intercept is left out of the picture." if task.intercept else ""
        spread = boot.intervals if boot is not None else None
        out.append("<figure>" + png(lambda ax: draw_coefficients(ax, shown, bounds, spread),
                                    size=(6.5, 0.9 + 0.38 * len(shown)), alt="coefficients and their bounds")
                   + "<figcaption>Each bar is a coefficient; a tick across it is a bound a rule sets on that "
                     "coefficient alone (red and solid: the coefficient sits on it and the rule holds the fit "
                     "back)." + (" Black whiskers: refit intervals (dotted: on a rule's edge or at zero in many "
                                 "refits)." if spread is not None else "") + note + "</figcaption></figure>")
        words = {name: ", ".join(w for w in (
            f">= {fmt(bounds.at[name, 'lower'])}" if np.isfinite(bounds.at[name, "lower"]) else "",
            f"<= {fmt(bounds.at[name, 'upper'])}" if np.isfinite(bounds.at[name, "upper"]) else "") if w)
            for name in bounds.index}
        coefs = coefs.assign(**{"bounds from rules": [words.get(n, "") for n in coefs.index],
                                "on a bound": [bool(bounds.at[n, "lower_binding"] or bounds.at[n, "upper_binding"])
                                               if n in bounds.index else False for n in coefs.index]})
    out.append(table(coefs))
    return out


def _pictures(job) -> list[str]:
    """The pictures that apply to this fit."""
    fit, task = job.fit, job.task
    out = []
    what = "score" if task.kind == "classification" else "prediction"
    for m in mean_rules(task, fit):
        out.append(figure("Group means under a rule", png(lambda ax, m=m: draw_means(ax, m, what),
                                                         size=(6.5, 1.2 + 0.55 * len(m.terms)), alt="group means"),
                          f"<code>{_html.escape(m.rule)}</code>: each group's mean {what} on the training rows; "
                          f"a tick marks how far that mean may go with the other groups held where they are "
                          f"({'the rule holds the fit back' if m.holds_back else 'the rule has room'})."))
    pa = predicted_actual(task, fit)
    if pa is not None:
        out.append(figure("Predicted against actual", png(lambda ax: draw_predicted_actual(
            ax, *pa, str(task.target_name)), size=(5.0, 4.2), alt="predicted against actual"),
            "Training rows" + (" (a seeded sample)" if len(pa[0]) < task.dataset.n else "") + "."))
    counted = argument_counts(task, fit.theta) if has_point(fit) else None
    if counted is not None:
        counts, edges = counted
        if task.loss.argument == "margin":
            neg, pos = task.dataset.labels
            label = f"margin y (x'w + b), y = +1 for {pos!r}"
            out.append(figure("Training margins", png(lambda ax: draw_histogram(ax, counts, edges, label, True),
                                                      alt="margin distribution"),
                              f"y = +1 for <code>{_html.escape(str(pos))}</code> (the positive label), -1 for "
                              f"<code>{_html.escape(str(neg))}</code>. Rows left of 0 are misclassified; rows "
                              f"between 0 and 1 are inside the margin."))
        else:
            label = ("residual (predicted mean - target)" if task.loss.link == "log"
                     else "residual (prediction - target)")
            out.append(figure("Training residuals", png(lambda ax: draw_histogram(ax, counts, edges, label, False),
                                                        alt="residual distribution")))
    cov = coverage(task, fit, job.held_out)
    if cov is not None:
        out.append(figure("Quantile coverage", png(lambda ax: draw_coverage(ax, *cov), alt="coverage against tau"),
                          f"Share of {cov[5]} rows at or under their predicted quantile, in groups by predicted "
                          f"level; a good fit keeps every group near tau = {cov[4]:g}."
                          + (" No rows were held out: coverage on held-out rows is the fairer check."
                             if cov[5] == "training" else "")))
    return out


def _evidence(fit) -> pd.DataFrame:
    """The certificate's reading and how the time was spent (one row for all the timings)."""
    times = fit.timings.as_dict()
    spent = ", ".join(f"{k} {fmt(v)}" for k, v in times.items())
    return pd.DataFrame({"value": [fit.status, fit.message, fit.objective, fit.gap, fit.rel_gap, fit.violation,
                                   f"{fit.solver}, route {fit.route}", spent]},
                        index=pd.Index(["status", "message", "objective", "certified gap", "relative gap",
                                        "worst violation (absolute)", "solver", "seconds"], name="evidence"))


def _compare(frame: pd.DataFrame) -> str:
    """The solver comparison: the columns that decide, notes under the table (never in it)."""
    cols = [c for c in COMPARE_COLUMNS if c in frame.columns]
    shown = frame[cols].rename(columns={"total_s": "seconds", "max_coef_diff": "largest coefficient difference"})
    notes = frame["note"].dropna() if "note" in frame.columns else pd.Series(dtype=str)
    notes = notes[notes.astype(str).str.len() > 0]
    return ("<h2>Solver comparison</h2>" + table(shown)
            + ("<ul class=\"note\">" + "".join(f"<li><b>{_html.escape(str(k))}</b>: {_html.escape(str(v))}</li>"
                                              for k, v in notes.items()) + "</ul>" if len(notes) else ""))


def html(job) -> str:
    if job.centres:
        return centres_html(job)
    if isinstance(job.fit, ClassesFit):
        return classes_html(job)
    fit, task, recipe = job.fit, job.task, job.recipe
    title = recipe.title or "learnopt fit"
    verdict = "certified optimal" if fit.status == "optimal" else str(fit.status)
    parts = [f"<h1>{_html.escape(title)}</h1>", provenance_html(provenance(job)),
             f"<p>{task.dataset.n} rows, {task.dataset.d} coefficients; {_html.escape(task.kind)} with the "
             f"{_html.escape(task.loss.describe())} loss. <b>{_html.escape(verdict)}</b>, objective "
             f"{fmt(fit.objective)} (evidence below).</p><p>{_maths(task)}</p>"]
    if len(fit.conflicts):
        cf = fit.conflicts.to_frame("must move by")
        cf.index.name = "rule"
        parts.append("<h2>Conflicting rules</h2><p class=\"note\">The rules cannot all hold. Each rule below is "
                     "part of the conflict; the amount is how far that rule alone must move, in its own units "
                     "(inf: moving it alone is not enough).</p>" + table(cf))
    parts += _coefficients(task, fit, job.bootstrap)
    if len(fit.prices):
        parts.append(standing(fit.rule_standing()))
    elif task.rules:
        parts.append("<h2>Rules</h2><ul>" + "".join(f"<li><code>{_html.escape(r.text)}</code></li>"
                                                    for r in task.rules) + "</ul>")
    parts += _pictures(job)
    parts += shape_parts(job)
    if job.evaluation is not None:
        parts.append("<h2>Held-out evaluation</h2>" + table(job.evaluation.metrics.to_frame("value")))
        if job.evaluation.confusion is not None:
            counts = job.evaluation.confusion
            shown = pd.DataFrame(counts.to_numpy(), index=pd.Index([f"actual {v}" for v in counts.index],
                                                                   name="held-out rows"),
                                 columns=[f"predicted {v}" for v in counts.columns])
            parts.append("<h3>Held-out rows by actual and predicted label</h3>" + table(shown))
        parts += _held_out_extras(job.evaluation, task.kind)
    if job.bootstrap is not None:
        parts += refit_parts(job.bootstrap)
    if job.intervals is not None:
        parts += interval_parts(job.intervals, job.coverage)
    if job.by_group is not None:
        parts += group_fit_parts(job.by_group)
    if job.path is not None:
        chosen = path_strength(job)
        parts.append(figure("Path", png(lambda ax: draw_path(ax, job.path, chosen), alt="coefficient path"),
                            "Coefficients as the penalty weakens (left to right)"
                            + (f"; the dashed line is the strength the fit above used ({chosen:.4g})"
                               if chosen is not None else "") + f". The path ends here: "
                            f"{_html.escape(job.path.stopped)}.")
                     + table(job.path.table.set_index("strength")))
    if job.compare is not None:
        parts.append(_compare(job.compare))
    parts.append("<h2>Evidence</h2>" + table(_evidence(fit)))
    if fit.attempts:
        parts.append("<h2>Solver attempts</h2>" + table(fit.attempt_table()))
    convexity = task.check()
    parts.append(f"<h2>Convexity</h2><p>{'convex by construction' if convexity.convex else 'NOT convex'} "
                 f"(problem class: {_html.escape(convexity.problem_class)})</p><ul>"
                 + "".join(f"<li>{_html.escape(a)}: {_html.escape(b)}</li>" for a, b in convexity.pieces) + "</ul>")
    parts.append(f"<p class=\"note\">{_html.escape(CAUTION)}</p>")
    return page(title, parts)


def _held_out_extras(evaluation, kind: str) -> list[str]:
    """The rules measured on the held-out rows, the groups compared, and the notes."""
    parts = []
    if evaluation.rules is not None and len(evaluation.rules):
        parts.append("<h3>Rules on the held-out rows</h3><p>Rules on predictions hold on the training rows by "
                     "construction; here they are measured on rows the fit has not seen.</p>"
                     + table(evaluation.rules.astype(object).where(evaluation.rules.notna(), None)))
    if evaluation.groups is not None:
        parts.append("<h3>Held-out rows by group</h3>" + group_picture(evaluation.groups, kind)
                     + table(evaluation.groups)
                     + "<h3>Largest gap between groups</h3>" + table(evaluation.gaps.to_frame("gap")))
    if evaluation.notes:
        parts.append("<ul>" + "".join(f"<li>{_html.escape(n)}</li>" for n in evaluation.notes) + "</ul>")
    return parts

