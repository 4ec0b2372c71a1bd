"""A self-contained HTML report of a recipe run (tables, and plots inlined as PNG when
matplotlib is installed)."""
from __future__ import annotations

import base64
import html as _html
import io

import numpy as np
import pandas as pd

from learnopt.core.status import CAUTION, PLACEMENT_CAUTION
from learnopt.problem.algebra import loss_argument
from learnopt.rules.regions import Ball, Polygon, Segment
from learnopt.scale.passes import argument_histogram

STYLE = """body{font-family:system-ui,sans-serif;max-width:60rem;margin:2rem auto;color:#222}
table{border-collapse:collapse;margin:.5rem 0}td,th{border:1px solid #ccc;padding:.2rem .5rem;text-align:right}
th{background:#f3f3f3}tr.binding td{background:#fff3cd}.note{color:#555;font-size:.9rem}
code{background:#f5f5f5;padding:0 .2rem}img{max-width:100%}
.gauge{display:inline-block;width:6rem;height:.6rem;background:#e4e4e4;border-radius:.3rem;vertical-align:middle}
.gauge span{display:block;height:100%;background:#3a8f6a;border-radius:.3rem}ul.rules li{margin:.25rem 0}"""


def _table(frame: pd.DataFrame, highlight=None) -> str:
    head = "".join(f"<th>{_html.escape(str(c))}</th>" for c in [frame.index.name or ""] + list(frame.columns))
    rows = []
    for idx, row in frame.iterrows():
        cls = ' class="binding"' if highlight is not None and highlight.get(idx, False) else ""
        cells = "".join(f"<td>{_html.escape(_fmt(v))}</td>" for v in row)
        rows.append(f"<tr{cls}><th>{_html.escape(str(idx))}</th>{cells}</tr>")
    return f"<table><tr>{head}</tr>{''.join(rows)}</table>"


def _fmt(v) -> str:
    if isinstance(v, (float, np.floating)):
        return f"{v:.6g}"
    return str(v)


def _bar(share: float) -> str:
    """A small HTML gauge of room left (share of the rule's limit)."""
    if not np.isfinite(share):
        return '<span class="note">unknown</span>'
    pct = max(0.0, min(1.0, float(share))) * 100
    return (f'<span class="gauge"><span style="width:{pct:.0f}%"></span></span> '
            f'<span class="note">{pct:.0f}%</span>')


def _standing(table: pd.DataFrame) -> str:
    """Rules holding the fit back (gain per unit relaxed), then rules with room (a gauge each)."""
    back, room = table[table["holds_back"]], table[~table["holds_back"]]
    out = ["<h2>Where the rules stand</h2>"]
    if len(back):
        out.append("<h3>Holding the fit back</h3><p class=\"note\">What relaxing each rule by one unit of its own "
                   "would gain in the objective.</p><ul class=\"rules\">" + "".join(
                       f"<li><code>{_html.escape(rule)}</code> <b>gains {row.gain_per_unit:.4g}</b></li>"
                       for rule, row in back.iterrows()) + "</ul>")
    if len(room):
        out.append("<h3>With room to spare</h3><p class=\"note\">Room left before the rule would bind, in its own "
                   "units; the gauge shows it as a share of the rule's limit.</p><ul class=\"rules\">" + "".join(
                       f"<li><code>{_html.escape(rule)}</code> room {_fmt(row.room)} {_bar(row.room_share)}</li>"
                       for rule, row in room.iterrows()) + "</ul>")
    return "".join(out)


def _png(draw, size=(6.5, 3.2)) -> str:
    """An <img> with the figure inlined, or a note when matplotlib is missing."""
    try:
        import matplotlib
        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:
        return '<p class="note">Plots need matplotlib (pip install \'learnopt[plot]\').</p>'
    fig, ax = plt.subplots(figsize=size)
    draw(ax)
    fig.tight_layout()
    buf = io.BytesIO()
    fig.savefig(buf, format="png", dpi=100)
    plt.close(fig)
    return f'<img alt="plot" src="data:image/png;base64,{base64.b64encode(buf.getvalue()).decode()}">'


def _argument_histogram(task, theta, bins: int = 40):
    """Histogram of the loss argument on the training rows (by passes for sharded data)."""
    if task.sharded:
        return argument_histogram(task.dataset, theta, task.intercept, task.loss.argument == "margin", bins)
    M, q, _ = loss_argument(task)
    return np.histogram(M @ theta - q, bins=bins)


def _maths(task) -> str:
    f = task.loss.describe()
    arg = "y_i (x_i'w + b)" if task.loss.argument == "margin" else "x_i'w + b - y_i"
    pens = " + ".join(p.describe() for p in task.penalties) or "0"
    return (f"minimise over w{', b' if task.intercept else ''}: &Sigma;<sub>i</sub> a<sub>i</sub> "
            f"{_html.escape(f)}({arg}) + {_html.escape(pens)} subject to the rules below, "
            f"with row weights a<sub>i</sub> summing to one (the weighted mean loss).")


def _page(title: str, parts: list[str]) -> str:
    return (f"<!doctype html><html lang=\"en\"><head><meta charset=\"utf-8\"><title>"
            f"{_html.escape(title)}</title><style>{STYLE}</style></head><body>"
            + "\n".join(parts) + "</body></html>\n")


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
    """The report of a centres recipe: rules, the verdict, evidence, centres and loads, a map."""
    fit, task, recipe = job.fit, job.task, job.recipe
    title = recipe.title or "learnopt centres"
    n = "sharded points" if task.source is not None else f"{len(task.X)} points"
    parts = [f"<h1>{_html.escape(title)}</h1>",
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
    parts.append("<h2>Evidence</h2>" + _table(ev))
    parts.append("<h2>Centres</h2>" + _table(fit.centres.join(fit.loads)))
    if len(task.names) >= 2:
        parts.append("<h2>Map</h2>" + _png(lambda ax: _map(ax, fit, task), size=(6.5, 5.0)))
    parts.append("<h2>Restarts</h2>" + _table(fit.restarts))
    if job.evaluation is not None:
        parts.append("<h2>Held-out points</h2>" + _table(job.evaluation.to_frame("value")))
    parts.append(f"<p class=\"note\">{_html.escape(PLACEMENT_CAUTION)}</p>")
    return _page(title, parts)


def html(job) -> str:
    if job.centres:
        return centres_html(job)
    fit, task, recipe = job.fit, job.task, job.recipe
    parts = [f"<h1>{_html.escape(recipe.title or 'learnopt fit')}</h1>",
             f"<p>{task.dataset.n} rows, {task.dataset.d} coefficients; {_html.escape(task.kind)} with the "
             f"{_html.escape(task.loss.describe())} loss.</p><p>{_maths(task)}</p>"]
    if task.rules:
        parts.append("<h2>Rules</h2><ul>" + "".join(f"<li><code>{_html.escape(r.text)}</code></li>"
                                                    for r in task.rules) + "</ul>")
    verdict = task.check()
    parts.append(f"<h2>Convexity</h2><p>{'convex by construction' if verdict.convex else 'NOT convex'} "
                 f"(problem class: {_html.escape(verdict.problem_class)})</p><ul>"
                 + "".join(f"<li>{_html.escape(a)}: {_html.escape(b)}</li>" for a, b in verdict.pieces) + "</ul>")
    ev = pd.DataFrame({"value": [fit.status, fit.message, fit.objective, fit.gap, fit.rel_gap, fit.violation,
                                 fit.solver, fit.route] + list(fit.timings.as_dict().values())},
                      index=pd.Index(["status", "message", "objective", "certified gap", "relative gap",
                                      "worst violation (absolute)", "solver", "route"]
                                     + [f"{k} seconds" for k in fit.timings.as_dict()], name="evidence"))
    parts.append("<h2>Evidence</h2>" + _table(ev))
    if len(fit.conflicts):
        cf = fit.conflicts.to_frame("must move by")
        cf.index.name = "rule"
        parts.append("<h2>Conflicting rules</h2><p class=\"note\">The rules cannot all hold. Each rule below is "
                     "part of the conflict; the amount is how far that rule alone must move, in its own units "
                     "(inf: moving it alone is not enough).</p>" + _table(cf))
    if fit.attempts:
        parts.append("<h2>Solver attempts</h2>" + _table(fit.attempt_table()))
    parts.append("<h2>Coefficients</h2>" + _table(fit.coefficients()))
    if len(fit.prices):
        parts.append(_standing(fit.rule_standing()))
    if np.all(np.isfinite(fit.coef.to_numpy())):
        counts, edges = _argument_histogram(task, fit.theta)
        label = "margin y (x'w + b)" if task.loss.argument == "margin" else "residual (prediction - target)"
        parts.append("<h2>Training " + label.split(" ")[0] + "s</h2>" +
                     _png(lambda ax: (ax.stairs(counts, edges, fill=True, color="#4a7"), ax.set_xlabel(label),
                                      ax.set_ylabel("rows"))))
    if job.path is not None:
        parts.append("<h2>Path</h2>" + _png(lambda ax: job.path.plot(ax=ax))
                     + f"<p class=\"note\">The path ends here: {_html.escape(job.path.stopped)}.</p>"
                     + _table(job.path.table.set_index("strength")))
    if job.compare is not None:
        parts.append("<h2>Solver comparison</h2>" + _table(job.compare))
    if job.evaluation is not None:
        parts.append("<h2>Held-out evaluation</h2>" + _table(job.evaluation.metrics.to_frame("value")))
        if job.evaluation.confusion is not None:
            parts.append(_table(job.evaluation.confusion))
    parts.append(f"<p class=\"note\">{_html.escape(CAUTION)}</p>")
    return _page(recipe.title or "learnopt fit", parts)
