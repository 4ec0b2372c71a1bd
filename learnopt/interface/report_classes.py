"""The report of a recipe run with several classes: the verdict, the coefficients per class (a
picture and a table), the rules with their prices, the held-out rows, the evidence."""
from __future__ import annotations

import html as _html

import numpy as np
import pandas as pd

from learnopt.core.status import CAUTION
from learnopt.interface.provenance import provenance, provenance_html
from learnopt.interface.report_blocks import figure, fmt, page, png, table


def _draw_classes(ax, coef: pd.DataFrame) -> None:
    """One group of bars per feature, one bar per class."""
    k = coef.shape[1]
    height = 0.8 / k
    rows = np.arange(coef.shape[0])
    for j, label in enumerate(coef.columns):
        ax.barh(rows + (j - (k - 1) / 2) * height, coef[label].to_numpy(), height=height, label=str(label))
    ax.set_yticks(rows, [str(n) for n in coef.index])
    ax.invert_yaxis()
    ax.axvline(0.0, color="black", linewidth=0.8)
    ax.set_xlabel("coefficient (change in the class's score per unit of the feature)")
    ax.legend(title="class", fontsize="small", loc="best")


def evidence(fit) -> pd.DataFrame:
    spent = ", ".join(f"{k} {fmt(v)}" for k, v in fit.timings.as_dict().items())
    return pd.DataFrame({"value": [fit.status, fit.message, fit.objective, fit.gap, fit.rel_gap, fit.violation,
                                   fit.identification, f"{fit.solver}, route {fit.route}", spent]},
                        index=pd.Index(["status", "message", "objective", "certified gap", "relative gap",
                                        "worst violation (absolute)", "identification", "solver", "seconds"],
                                       name="evidence"))


def classes_html(job) -> str:
    fit, task, recipe = job.fit, job.task, job.recipe
    title = recipe.title or "learnopt fit"
    verdict = "certified optimal" if fit.status == "optimal" else str(fit.status)
    labels = ", ".join(map(str, task.labels))
    parts = [f"<h1>{_html.escape(title)}</h1>", provenance_html(provenance(job)),
             f"<p>{task.dataset.n} rows, {task.dataset.d} features, {len(task.labels)} classes "
             f"({_html.escape(labels)}); the {_html.escape(task.loss.describe())} loss over the classes' scores "
             f"x'w<sub>k</sub> + b<sub>k</sub>. <b>{_html.escape(verdict)}</b>, objective {fmt(fit.objective)} "
             f"(evidence below).</p>"]
    if fit.status.has_point:
        parts.append(figure("Coefficients by class", png(lambda ax: _draw_classes(ax, fit.coef),
                                                         size=(6.5, 1.0 + 0.5 * len(fit.coef)),
                                                         alt="coefficients by class"),
                            "Each group of bars is a feature, one bar per class; a bar is how much a unit of the "
                            f"feature adds to that class's score ({_html.escape(fit.identification)}; the "
                            "intercepts are in the table)."))
        parts.append(table(fit.coefficients()))
    if len(fit.prices):
        rules = pd.DataFrame({"binds": fit.binding, "price": fit.prices})
        rules.index.name = "rule"
        parts.append("<h2>Rules</h2><p>Price: how much the objective would fall per unit the rule is relaxed "
                     "(0 when the rule has room to spare).</p>" + table(rules))
    if job.evaluation is not None:
        parts.append("<h2>Held-out evaluation</h2>" + table(job.evaluation.to_frame("value")))
    parts.append("<h2>Evidence</h2>" + table(evidence(fit)))
    if fit.attempts:
        attempts = pd.DataFrame([{"solver": a.solver, "outcome": a.outcome, "objective": a.objective, "gap": a.gap,
                                  "seconds": a.seconds} for a in fit.attempts]).set_index("solver")
        parts.append("<h2>Solver attempts</h2>" + table(attempts))
    convexity = task.check()
    parts.append(f"<h2>Convexity</h2><p>{'convex by construction' if convexity.convex else 'NOT convex'} "
                 f"(problem class: {_html.escape(convexity.problem_class)})</p><ul>"
                 + "".join(f"<li>{_html.escape(a)}: {_html.escape(b)}</li>" for a, b in convexity.pieces) + "</ul>")
    parts.append(f"<p class=\"note\">{_html.escape(CAUTION)}</p>")
    return page(title, parts)
