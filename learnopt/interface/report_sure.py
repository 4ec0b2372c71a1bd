"""The report's "How sure is the fit" part: refit intervals (bootstrap), how often each rule
binds across refits, and prediction intervals with the coverage measured on held-out rows."""
from __future__ import annotations

import html as _html

import numpy as np
import pandas as pd

from learnopt.interface.report_blocks import figure, png, table
from learnopt.interface.report_pictures import BAD, GOOD, GREY


def refit_parts(boot) -> list[str]:
    """Tables of the refit intervals and of the rules' binding shares, with what they assume."""
    iv = boot.intervals.rename(columns={"low": f"low ({(1 - boot.level) / 2:.0%})",
                                        "high": f"high ({(1 + boot.level) / 2:.0%})",
                                        "zero_share": "share at zero", "edge_share": "share on a rule's edge",
                                        "flagged": "normal theory does not apply"})
    failed = boot.n - boot.certified
    parts = ["<h2>How sure: refits on resampled rows</h2>",
             f"<p>{boot.n} refits on rows drawn with replacement ({_html.escape(boot.method)}, seed {boot.seed}); "
             f"{boot.certified} certified{f', {failed} not certified and left out' if failed else ''}; "
             f"{boot.seconds:.2f} s. Every rule and penalty was applied again in each refit. The whiskers on the "
             f"coefficient chart are these {boot.level:.0%} percentile intervals.</p>",
             table(iv, highlight=iv["normal theory does not apply"])]
    if len(boot.rules):
        rules = boot.rules.rename(columns={"binding_share": "share of refits it binds",
                                           "absent": "refits without its rows"})
        parts.append("<h3>How often each rule holds the fit back</h3>" + table(rules))
    parts.append(f"<p class=\"note\">{_html.escape(boot.caution())}</p>")
    return parts


def interval_parts(intervals, coverage: dict) -> list[str]:
    """The calibrated prediction intervals: coverage measured against the level asked for."""
    rows = coverage["rows"]
    lo, hi = coverage["usual_range"]
    facts = pd.DataFrame({"value": [intervals.method, intervals.level, intervals.margin,
                                    intervals.calibration_rows, rows, coverage["covered"],
                                    f"{lo:.3g} to {hi:.3g}", coverage["mean_width"]]},
                         index=pd.Index(["method", "level asked for", "margin added (target units)",
                                         "calibration rows", "rows it was checked on", "coverage measured",
                                         "usual range on that many rows", "mean width"], name="prediction intervals"))
    caption = (f"The intervals were calibrated on one half of the held-out rows and checked on the other "
               f"{rows}. On that many rows the measured share usually falls between {lo:.3g} and {hi:.3g} "
               f"when the true coverage is {intervals.level:g}.")
    return ["<h2>How sure: prediction intervals</h2>",
            figure("Coverage against the level asked for",
                   png(lambda ax: draw_coverage_level(ax, intervals.level, coverage["covered"], (lo, hi),
                                                      intervals.guarantee), size=(6.5, 1.9),
                       alt="coverage measured against the level"), caption),
            table(facts), f"<p class=\"note\">{_html.escape(intervals.caution())}</p>"]


def draw_coverage_level(ax, level: float, measured: float, usual: tuple, guarantee: tuple) -> None:
    """One line from 0 to 1: the usual range (grey band), the guarantee (red ticks), the
    measured coverage (a dot)."""
    ax.axvspan(*usual, color=GREY, alpha=0.25, label="usual range on these rows")
    for v in guarantee:
        ax.axvline(v, color=BAD, lw=1.5)
    ax.plot([], [], color=BAD, lw=1.5, label=f"guarantee {guarantee[0]:g} to {guarantee[1]:.3g}")
    ax.plot([measured], [0.5], "o", color=GOOD, ms=10, label=f"measured {measured:.3g}")
    ax.set_xlim(max(0.0, min(usual[0], measured) - 0.05), min(1.0, max(usual[1], measured) + 0.05))
    ax.set_ylim(0, 1)
    ax.set_yticks([])
    ax.set_xlabel("share of held-out rows inside their interval")
    ax.legend(loc="lower center", bbox_to_anchor=(0.5, 1.02), ncol=3, fontsize=8, frameon=False)


GROUP_BARS = {"classification": ("positive_rate", "true_positive_rate", "false_positive_rate"),
              "regression": ("mean_prediction", "mean_target")}


def group_picture(groups: pd.DataFrame, kind: str) -> str:
    """Group rates (classification) or mean prediction and mean target (regression) side by side."""
    cols = [c for c in GROUP_BARS[kind] if c in groups.columns]
    what = "rates" if kind == "classification" else "means"
    caption = ("Each group's share predicted positive, true-positive rate and false-positive rate on the held-out "
               "rows; the demographic-parity gap is the spread of the first, the equalised-odds gap the larger "
               "spread of the other two (Hardt et al. 2016)." if kind == "classification" else
               "Each group's mean prediction beside its mean target on the held-out rows.")
    return figure(f"Held-out {what} by group", png(lambda ax: draw_groups(ax, groups, cols),
                                                   size=(6.5, 1.2 + 0.5 * len(groups) * len(cols) ** 0.5),
                                                   alt=f"held-out {what} by group"), caption)


def draw_groups(ax, groups: pd.DataFrame, cols: list[str]) -> None:
    names = [str(g) for g in groups.index]
    y = np.arange(len(names))[::-1]
    height = 0.8 / len(cols)
    colours = (GOOD, BAD, GREY)
    for k, c in enumerate(cols):
        ax.barh(y + (len(cols) / 2 - k - 0.5) * height, groups[c].to_numpy(dtype=float), height=height,
                color=colours[k % 3], label=c.replace("_", " "))
    ax.set_yticks(y, names)
    ax.legend(loc="lower center", bbox_to_anchor=(0.5, 1.0), ncol=len(cols), fontsize=8, frameon=False)


SHOWN_GROUPS = 30     # group fits listed in the report and on the terminal (the CSV holds them all)


def group_fit_parts(fits) -> list[str]:
    """One fit per group: the counts, and the first groups' fits."""
    shown = fits.table.drop(columns=["message"])
    failed = len(shown) - fits.certified
    return [f"<h2>One fit per {_html.escape(str(fits.column))}</h2>",
            f"<p>{len(shown)} groups, each fitted on its own rows with every rule compiled again there; "
            f"{fits.certified} certified{f', {failed} not' if failed else ''}; {fits.seconds:.2f} s."
            + (f" The first {SHOWN_GROUPS} are listed; the groups output (CSV) holds them all." if len(shown) >
               SHOWN_GROUPS else "") + "</p>",
            table(shown.head(SHOWN_GROUPS))]
