"""Where each rule stands at the answer: the rules that hold the fit back, with what relaxing
each by one unit would gain, then the rules with room to spare, with how much room is left.

One row per rule as the user wrote it (the two halves of a chained rule such as
``0 <= stops <= 3`` are one rule: it holds the fit back when either half does, its gain is the
sum of the halves' prices and its room the smaller of theirs), in the order the rules were given.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

COLUMNS = ["holds_back", "gain_per_unit", "room", "room_share"]


def rule_standing(fit) -> pd.DataFrame:
    """The standing of every rule of ``fit`` (see the module text).

    Columns: ``holds_back`` (the rule binds at the answer), ``gain_per_unit`` (fall in the
    objective per unit relaxation; 0 for rules with room), ``room`` (the smallest distance to
    the rule's limit over the rows it covers, in the rule's own units; 0 when it holds the fit
    back; NaN when unknown: a loaded fit, or a row rule on sharded data), ``room_share`` (room
    as a share of the rule's limit, between 0 and 1, for a gauge: room / max(|limit|, room)).
    """
    task = fit.task
    order = list(dict.fromkeys(r.text for r in getattr(task, "rules", ())))
    reqs = getattr(task, "requirements", ())
    theta = fit.theta if np.all(np.isfinite(fit.coef.to_numpy())) else None
    rows = {}
    for text in order:
        pieces = [r for r in reqs if r.source == text]
        holds = bool(fit.binding.get(text, False))
        gain = float(fit.prices.get(text, 0.0))
        room = share = np.nan
        if pieces and theta is not None:
            slack = [float(np.min(r.slack(theta))) for r in pieces if r.sense != "=="]
            limit = max((float(np.max(np.abs(r.rhs))) if r.sense != "norm" else abs(float(r.bound))
                         for r in pieces), default=0.0)
            if any(r.sense == "==" for r in pieces) or holds:
                room, share = 0.0, 0.0
            elif slack:
                room = max(0.0, min(slack))
                share = room / max(limit, room) if room > 0 else 0.0
        rows[text] = (holds, gain if holds else 0.0, room, share)
    table = pd.DataFrame.from_dict(rows, orient="index", columns=COLUMNS)
    table.index.name = "rule"
    table["holds_back"] = table["holds_back"].astype(bool)
    return pd.concat([table[table["holds_back"]], table[~table["holds_back"]]])


def gauge(share: float, width: int = 10) -> str:
    """A text gauge of room left, e.g. ``'######----  60%'`` (plain characters: any terminal)."""
    if not np.isfinite(share):
        return "unknown"
    filled = int(round(max(0.0, min(1.0, share)) * width))
    return "#" * filled + "-" * (width - filled) + f" {share:4.0%}"


def standing_lines(table: pd.DataFrame) -> list[str]:
    """The standing as text: two short lists, rules holding the fit back, then rules with room."""
    lines = []
    back, room = table[table["holds_back"]], table[~table["holds_back"]]
    if len(back):
        lines.append("rules holding the fit back (objective gained per unit of relaxation):")
        lines += [f"  {rule}   gains {row.gain_per_unit:.4g}" for rule, row in back.iterrows()]
    if len(room):
        lines.append("rules with room to spare (room left, in the rule's units):")
        lines += [f"  {rule}   room {row.room:.4g}  [{gauge(row.room_share)}]" if np.isfinite(row.room)
                  else f"  {rule}   room unknown" for rule, row in room.iterrows()]
    return lines
