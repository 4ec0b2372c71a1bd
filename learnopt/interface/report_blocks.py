"""The pieces every report page is made of: the style sheet, compact numbers, tables that stay
inside the page, inlined pictures and the page frame. All user text is HTML-escaped here."""
from __future__ import annotations

import base64
import html
import io
import math

import numpy as np
import pandas as pd

STYLE = """body{font-family:system-ui,sans-serif;max-width:60rem;margin:1.5rem auto;padding:0 1rem;color:#222;
line-height:1.4;text-align:left}
h1{font-size:1.6rem;margin-bottom:.4rem}h2{font-size:1.25rem;margin-top:1.8rem;border-bottom:1px solid #ddd}
.wide{max-width:100%;overflow-x:auto}
table{border-collapse:collapse;margin:.5rem 0}td,th{border:1px solid #ccc;padding:.2rem .5rem;text-align:left;
vertical-align:top}
td.num{text-align:right;font-variant-numeric:tabular-nums;white-space:nowrap}
th{background:#f3f3f3;font-weight:600}tr.binding td{background:#fff3cd}.note{color:#555;font-size:.9rem}
code{background:#f5f5f5;padding:0 .2rem;overflow-wrap:anywhere}img{max-width:100%;height:auto;display:block}
dl.provenance{display:grid;grid-template-columns:max-content minmax(0,1fr);gap:.15rem 1rem;
background:#f7f7f4;border:1px solid #ddd;padding:.6rem .9rem;margin:.6rem 0 1rem}
dl.provenance dt{font-weight:600;color:#444}dl.provenance dd{margin:0;min-width:0;overflow-wrap:anywhere}
.hash code{font-size:.8rem}ul.hashes{margin:.2rem 0;padding-left:1.2rem}
.gauge{display:inline-block;width:6rem;height:.6rem;background:#e4e4e4;border-radius:.3rem;vertical-align:middle}
.gauge span{display:block;height:100%;background:#3a8f6a;border-radius:.3rem}ul.rules li{margin:.25rem 0}
figure{margin:.6rem 0}figcaption{color:#555;font-size:.9rem}"""

DIGITS = 4           # significant digits of every number on the page


def fmt(v) -> str:
    """A value as page text: numbers to 4 significant digits, booleans as words, gaps as a dash."""
    if v is None:
        return "\u2014"
    if isinstance(v, (bool, np.bool_)):
        return "yes" if v else "no"
    if isinstance(v, (int, np.integer)):
        return f"{int(v):,}" if abs(int(v)) >= 10_000 else str(int(v))
    if isinstance(v, (float, np.floating)):
        v = float(v)
        if math.isnan(v):
            return "\u2014"
        if math.isinf(v):
            return "\u221e" if v > 0 else "-\u221e"
        if v == 0:
            return "0"
        if v.is_integer() and abs(v) < 1e6:
            return str(int(v))
        return f"{v:.{DIGITS}g}"
    return str(v)


def _numeric(v) -> bool:
    return isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, (bool, np.bool_))


def table(frame: pd.DataFrame, highlight=None) -> str:
    """An HTML table of ``frame`` (its index as the first column), inside a box that scrolls
    sideways rather than widening the page. ``highlight`` marks rows (index -> bool). A column
    of numbers only is right-aligned; every other cell reads left to right."""
    head = "".join(f"<th>{html.escape(str(c))}</th>" for c in [frame.index.name or ""] + list(frame.columns))
    numeric = [all(_numeric(v) or v is None for v in frame.iloc[:, j]) for j in range(frame.shape[1])]
    rows = []
    for idx, row in frame.iterrows():
        cls = ' class="binding"' if highlight is not None and highlight.get(idx, False) else ""
        cells = "".join(f"<td{' class=num' if num and _numeric(v) else ''}>{html.escape(fmt(v))}</td>"
                        for v, num in zip(row, numeric))
        rows.append(f"<tr{cls}><th>{html.escape(fmt(idx))}</th>{cells}</tr>")
    return f"<div class=\"wide\"><table><tr>{head}</tr>{''.join(rows)}</table></div>"


def png(draw, size=(6.5, 3.2), alt: str = "plot") -> str:
    """An <img> with the figure ``draw(ax)`` makes inlined as PNG, or a note when matplotlib is
    missing."""
    try:
        import matplotlib
        matplotlib.use("Agg")
        import matplotlib.pyplot as plt
    except ImportError:
        return '<p class="note">Plots need matplotlib (pip install \'learnopt[plot]\').</p>'
    fig, ax = plt.subplots(figsize=size)
    try:
        draw(ax)
        fig.tight_layout()
        buf = io.BytesIO()
        fig.savefig(buf, format="png", dpi=100)
    finally:
        plt.close(fig)
    return (f'<img alt="{html.escape(alt)}" width="{int(size[0] * 100)}" '
            f'src="data:image/png;base64,{base64.b64encode(buf.getvalue()).decode()}">')


def figure(title: str, picture: str, caption: str = "") -> str:
    """A section with a picture and an (already escaped) caption."""
    cap = f"<figcaption>{caption}</figcaption>" if caption else ""
    return f"<h2>{html.escape(title)}</h2><figure>{picture}{cap}</figure>"


def page(title: str, parts: list[str]) -> str:
    return (f"<!doctype html><html lang=\"en\"><head><meta charset=\"utf-8\">"
            f"<meta name=\"viewport\" content=\"width=device-width, initial-scale=1\"><title>"
            f"{html.escape(title)}</title><style>{STYLE}</style></head><body>"
            + "\n".join(parts) + "</body></html>\n")


def gauge(share: float) -> str:
    """A small HTML gauge of room left (share of the rule's limit)."""
    if not np.isfinite(share):
        return '<span class="note">unknown</span>'
    pct = max(0.0, min(1.0, float(share))) * 100
    return (f'<span class="gauge"><span style="width:{pct:.0f}%"></span></span> '
            f'<span class="note">{pct:.0f}%</span>')


def standing(frame: pd.DataFrame) -> str:
    """Rules holding the fit back (gain per unit relaxed), then rules with room (a gauge each)."""
    back, room = frame[frame["holds_back"]], frame[~frame["holds_back"]]
    out = ["<h2>Where the rules stand</h2>"]
    if len(back):
        out.append("<h3>Holding the fit back</h3><p class=\"note\">What relaxing each rule by one unit of its own "
                   "would gain in the objective.</p><ul class=\"rules\">" + "".join(
                       f"<li><code>{html.escape(rule)}</code> <b>gains {fmt(row.gain_per_unit)}</b></li>"
                       for rule, row in back.iterrows()) + "</ul>")
    if len(room):
        out.append("<h3>With room to spare</h3><p class=\"note\">Room left before the rule would bind, in its own "
                   "units; the gauge shows it as a share of the rule's limit.</p><ul class=\"rules\">" + "".join(
                       f"<li><code>{html.escape(rule)}</code> room {fmt(row.room)} {gauge(row.room_share)}</li>"
                       for rule, row in room.iterrows()) + "</ul>")
    return "".join(out)
