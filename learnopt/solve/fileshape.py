"""The shape a regression or classification model file must have: every field present, none
unknown, each of its type. :func:`shape_problems` lists every problem at once, each naming the
field as a dotted path (``evidence.gap``), so a damaged or hand-made file is refused with one
clear message instead of failing somewhere inside the reader.
"""
from __future__ import annotations

TEXT, NUMBER, WHOLE, FLAG, TABLE, LIST = "text", "a number", "a whole number", "true or false", "a table", "a list"
NONE = "null"

# field -> (what it has to be, required?); numbers may also be the text of a non-finite float
TOP = {"format": (TEXT, True), "schema_version": (WHOLE, True), "digest": (TEXT, False), "run": (TEXT, False),
       "task": (TABLE, True), "coef": (TABLE, True), "intercept": (NUMBER, True), "evidence": (TABLE, True)}
TASK = {"kind": (TEXT, True), "loss": (TABLE, True), "penalties": (LIST, True), "rules": (LIST, True),
        "intercept": (FLAG, True), "target": ((TEXT, NUMBER, NONE), False), "features": (LIST, True),
        "labels": ((LIST, NONE), False), "encoding": ((TABLE, NONE), False),
        "offset": (TABLE, False)}
EVIDENCE = {"status": (TEXT, True), "message": (TEXT, True), "objective": (NUMBER, True), "gap": (NUMBER, True),
            "rel_gap": (NUMBER, True), "violation": (NUMBER, True), "solver": ((TEXT, NONE), True),
            "route": ((TEXT, NONE), True), "timings": (TABLE, True), "prices": (TABLE, True),
            "binding": (TABLE, True), "conflicts": (TABLE, False), "attempts": (LIST, False),
            "versions": (TABLE, False)}
NON_FINITE = {"nan", "inf", "-inf"}


def _is(value, kind) -> bool:
    if isinstance(kind, tuple):
        return any(_is(value, k) for k in kind)
    if kind == NONE:
        return value is None
    if kind == TEXT:
        return isinstance(value, str)
    if kind == FLAG:
        return isinstance(value, bool)
    if kind == WHOLE:
        return isinstance(value, int) and not isinstance(value, bool)
    if kind == NUMBER:
        return (isinstance(value, (int, float)) and not isinstance(value, bool)) or value in NON_FINITE
    if kind == TABLE:
        return isinstance(value, dict)
    return isinstance(value, list)


def _named(kind) -> str:
    return " or ".join(kind) if isinstance(kind, tuple) else kind


def _section(found: dict, fields: dict, where: str) -> list[str]:
    out = []
    for key, (kind, required) in fields.items():
        if key not in found:
            if required:
                out.append(f"{where}{key} is missing")
        elif not _is(found[key], kind):
            out.append(f"{where}{key} is {found[key]!r}; it has to be {_named(kind)}")
    out += [f"{where}{key} is not a field of a model file" for key in found if key not in fields]
    return out


def shape_problems(saved: dict) -> list[str]:
    """Every way ``saved`` (a model file's JSON) departs from the shape above."""
    out = _section(saved, TOP, "")
    task, evidence, coef = saved.get("task"), saved.get("evidence"), saved.get("coef")
    if isinstance(task, dict):
        out += _section(task, TASK, "task.")
        features = task.get("features")
        if isinstance(features, list) and isinstance(coef, dict):
            if not all(isinstance(f, str) for f in features):
                out.append("task.features has to be a list of names (text)")
            elif set(coef) != set(features):
                extra, missing = sorted(set(coef) - set(features)), sorted(set(features) - set(coef))
                out.append("coef has to hold one number per feature"
                           + (f"; missing {', '.join(missing)}" if missing else "")
                           + (f"; not features: {', '.join(extra)}" if extra else ""))
        if isinstance(coef, dict):
            out += [f"coef.{k} is {v!r}; it has to be a number" for k, v in coef.items() if not _is(v, NUMBER)]
        offset = task.get("offset")
        if isinstance(offset, dict) and (offset.get("kind") not in ("offset", "exposure")
                                         or not isinstance(offset.get("column"), (str, type(None)))
                                         or set(offset) != {"kind", "column"}):
            out.append("task.offset has to hold kind (offset or exposure) and column (text or null)")
        if isinstance(task.get("rules"), list) and not all(isinstance(r, (str, dict)) for r in task["rules"]):
            out.append("task.rules has to be a list of rule texts (or rule objects as plain data)")
    if isinstance(evidence, dict):
        out += _section(evidence, EVIDENCE, "evidence.")
        timings = evidence.get("timings")
        if isinstance(timings, dict):
            out += [f"evidence.timings.{k} is {v!r}; it has to be a number" for k, v in timings.items()
                    if not _is(v, NUMBER)]
    return out
