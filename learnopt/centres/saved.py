"""Reading a centres model file back (written by :meth:`CentresFit.save`).

The loaded fit carries no points: its task describes the coordinates, k, fixed centres and
rules, so the fit can assign and evaluate new points, and show its evidence.
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from learnopt.centres.placement import CentresTask, Placement
from learnopt.centres.result import LOCAL, CentresFit
from learnopt.core.errors import DataError
from learnopt.core.files import intact
from learnopt.rules.saving import from_plain


def _number(value, where: str, path: str) -> float:
    """A saved number: finite, or the text of a non-finite float only where that is allowed."""
    try:
        out = float(value) if not isinstance(value, bool) else None
    except (TypeError, ValueError):
        out = None
    if out is None:
        raise DataError(f"Model file {path!r}: {where} is {value!r}; it has to be a number.")
    return out


def from_saved(saved: dict, path: str) -> CentresFit:
    """The centres fit in a model file's JSON (already checked for format and schema)."""
    if not intact(saved):
        raise DataError(f"Model file {path!r}: its content no longer matches the digest written with it (or it has "
                        f"none), so its centres and evidence cannot be trusted; place the centres again.")
    t, ev = saved["task"], saved.get("evidence")
    try:
        names = tuple(str(n) for n in t["coordinates"])
        k = int(t["k"])
        fixed = tuple(tuple(_number(v, "task.fixed", path) for v in c) for c in t.get("fixed", ()))
        rules = tuple(Placement(from_plain({key: v for key, v in r.items() if key != "centre"}), r.get("centre"))
                      for r in t.get("rules", ()))
        C = np.array([[_number(v, "centres", path) for v in row] for row in saved["centres"]], dtype=float)
        W = [_number(v, "loads.weight", path) for v in saved["loads"]["weight"]]
        counts = [int(v) for v in saved["loads"]["points"]]
        restarts = pd.DataFrame(ev["restarts"]).set_index("restart")
    except (KeyError, TypeError, AttributeError, ValueError) as exc:
        raise DataError(f"Model file {path!r} is not a complete centres model file (problem at {exc!s}); it was "
                        f"written by another version of learnopt or edited by hand.") from None
    if C.shape != (k, len(names)) or not np.all(np.isfinite(C)) or len(W) != k or len(counts) != k:
        raise DataError(f"Model file {path!r}: the centres must be {k} rows of {len(names)} finite coordinates, "
                        f"with one load per centre.")
    if ev.get("status") != LOCAL:
        raise DataError(f"Model file {path!r}: evidence.status is {ev.get('status')!r}; a placement's status is "
                        f"{LOCAL!r}.")
    task = CentresTask(np.zeros((0, len(names))), np.zeros(0), names, k, fixed, rules)
    fit = CentresFit.build(task, C, np.zeros(0, dtype=int), np.asarray(W), counts,
                           _number(ev["objective"], "evidence.objective", path), int(ev["iterations"]), restarts,
                           _number(ev["violation"], "evidence.violation", path),
                           _number(ev["seconds"], "evidence.seconds", path))
    fit.message = str(ev.get("message", fit.message))
    fit.extras = {"versions": ev.get("versions", {}), "loaded_from": path}
    return fit
