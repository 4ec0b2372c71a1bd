"""Model files: a fit saved as JSON (no pickle), with a schema version.

A file holds the task's description (kind, loss, penalties, rules as text or, for rule objects
such as a box, as plain data (``rules.saving``), intercept, feature names, the encoding of
DataFrame columns, class labels), the coefficients, and the evidence
(status, message, objective, gap, violation, solver, route, timings, prices, versions).
Floats are written with ``repr`` (shortest round-trip form), so a loaded fit predicts exactly
what the saved one did. The loaded fit carries no training data: its ``task`` is a
description for prediction and evaluation (a plain problem value unless the reader asks for
another type), not something to solve again.

Schema 2 names encoded levels ``column.level``. A schema-1 file named them ``column=level``; on
loading, its coefficient names, feature names and the names inside its penalties are translated
(its rule texts are kept as written: the rule compiler still reads the old form).
"""
from __future__ import annotations

import dataclasses
import json
import os

import numpy as np
import pandas as pd

from learnopt.core.errors import DataError, LearnoptError
from learnopt.core.files import MODEL_FORMAT, json_ready, MODEL_SCHEMA, intact, read_model, seal, write_atomic
from learnopt.core.status import Status
from learnopt.core.version import package_versions
from learnopt.data.encoding import Encoding
from learnopt.data.shaping import basis_from_plain
from learnopt.data.table import Dataset
from learnopt.problem.problem import Problem
from learnopt.rules.saving import file_entry, from_plain
from learnopt.solve.fileshape import shape_problems
from learnopt.solve.solvers import REGISTRY
from learnopt.solve.timings import Timings
from learnopt.terms import losses as _losses
from learnopt.terms.losses import KINDS
from learnopt.terms import penalties as _penalties



def _tupled(value):
    if isinstance(value, list):
        return tuple(_tupled(v) for v in value)
    return value


def _float(value):
    """Back from _plain: 'nan' / 'inf' / '-inf' strings become floats again."""
    return float(value)


def _piece(obj) -> dict:
    if isinstance(obj, (_losses.Custom, _penalties.CustomPenalty)):
        raise LearnoptError(f"{obj.describe()} is a Python function and cannot be written to a model file; "
                            f"model files hold built-in losses and penalties only (no pickle).")
    return {"class": type(obj).__name__,
            "fields": {f.name: json_ready(getattr(obj, f.name)) for f in dataclasses.fields(obj)}}


def _rebuild(entry: dict, module, base):
    classes = {c.__name__: c for c in vars(module).values()
               if isinstance(c, type) and issubclass(c, base) and c is not base}
    cls = classes.get(entry.get("class"))
    if cls is None:
        raise DataError(f"The model file names an unknown piece {entry.get('class')!r}; it was written by "
                        f"another version of learnopt.")
    return cls(**{k: _tupled(v) for k, v in entry.get("fields", {}).items()})


def encoding_entry(enc) -> dict | None:
    """A DataFrame encoding as plain data (None without one)."""
    return None if enc is None else {
        "columns": list(enc.columns), "levels": json_ready(enc.levels), "reference": json_ready(enc.reference),
        "names": list(enc.names), **({"shapes": {c: b.plain() for c, b in enc.shapes.items()}} if enc.shapes else {})}


def encoding_from(entry: dict | None):
    """The encoding :func:`encoding_entry` wrote."""
    return None if entry is None else Encoding(
        tuple(entry["columns"]), {k: tuple(v) for k, v in entry["levels"].items()}, dict(entry["reference"]),
        tuple(entry["names"]), {c: basis_from_plain(c, b) for c, b in (entry.get("shapes") or {}).items()})


def _versions(solver: str | None) -> dict:
    wanted = {pkg: pkg for pkg in ("learnopt", "cvxpy", "numpy", "scipy")}
    spec = REGISTRY.get(solver) if solver and solver != "numpy" else None
    if spec is not None:
        wanted[solver] = spec.module
    return package_versions(wanted)


def to_dict(fit, *, run: str | None = None) -> dict:
    """The model file's content (JSON-ready); ``run`` is the identifier of the recipe run that
    writes it (kept under "run", inside what the digest covers), when there is one."""
    task = fit.task
    ds = task.dataset
    enc = ds.encoding
    return {
        "format": MODEL_FORMAT, "schema_version": MODEL_SCHEMA, **({"run": run} if run else {}),
        "task": {
            "kind": task.kind, "loss": _piece(task.loss), "penalties": [_piece(p) for p in task.penalties],
            "rules": [file_entry(r) for r in task.rules], "intercept": task.intercept,
            "target": json_ready(task.target_name), "features": list(ds.names),
            "labels": json_ready(list(ds.labels)) if ds.labels is not None else None,
            **({"offset": {"kind": ds.offset_source[0], "column": ds.offset_source[1]}}
               if getattr(ds, "offset_source", None) is not None else {}),
            "encoding": encoding_entry(enc),
        },
        "coef": {name: json_ready(float(v)) for name, v in fit.coef.items()},
        "intercept": json_ready(float(fit.intercept)),
        "evidence": {
            "status": fit.status, "message": fit.message, "objective": json_ready(fit.objective),
            "gap": json_ready(fit.gap), "rel_gap": json_ready(fit.rel_gap), "violation": json_ready(fit.violation),
            "solver": fit.solver, "route": fit.route, "timings": fit.timings.as_dict(),
            "prices": json_ready(fit.prices.to_dict()), "binding": json_ready(fit.binding.to_dict()),
            "conflicts": json_ready(fit.conflicts.to_dict()),
            "attempts": [{"solver": a.solver, "outcome": a.outcome, "objective": json_ready(float(a.objective)),
                          "gap": json_ready(float(a.gap)), "seconds": json_ready(float(a.seconds))} for a in fit.attempts],
            "versions": _versions(fit.solver),
        },
    }


def save(fit, path, *, run: str | None = None) -> None:
    """Write ``fit`` to ``path`` as JSON, atomically (a temporary file renamed into place); ``run``
    stamps it with a recipe run's identifier before the digest is taken."""
    write_atomic(path, json.dumps(seal(to_dict(fit, run=run)), indent=1))


def _renamed(value, renamed: dict):
    """``value`` (strings, possibly in nested lists and dicts) with every old level name replaced."""
    if isinstance(value, str):
        return renamed.get(value, value)
    if isinstance(value, (list, tuple)):
        return type(value)(_renamed(v, renamed) for v in value)
    if isinstance(value, dict):
        return {_renamed(k, renamed): _renamed(v, renamed) for k, v in value.items()}
    return value


def _translated(saved: dict, renamed: dict, path: str) -> dict:
    """A schema-1 file's contents with the level names of today; refused when a translated name
    meets a name the file already had (a column literally named like a level)."""
    t = dict(saved["task"])
    clash = sorted(set(renamed.values()) & (set(t["features"]) - set(renamed)))
    if clash:
        raise DataError(f"Model file {path!r} (schema 1) has a column named {clash[0]!r} beside the level "
                        f"written {next(k for k, v in renamed.items() if v == clash[0])!r}; both would be "
                        f"called {clash[0]!r} now. Fit the task again with that column renamed.")
    t["features"] = _renamed(t["features"], renamed)
    t["penalties"] = [{**p, "fields": _renamed(p.get("fields", {}), renamed)} for p in t["penalties"]]
    return {**saved, "task": t, "coef": _renamed(saved["coef"], renamed)}


def read(path, *, task_type=None) -> dict:
    """The fields of a fit written by :func:`save` (keyword arguments for ``Fit``); refuse other
    formats and newer schema versions. ``task_type`` builds the task description (default
    :class:`~learnopt.problem.problem.Problem`; the package face passes the user's Task)."""
    path = os.fspath(path)
    saved = read_model(path)
    if saved["task"]["kind"] not in KINDS:
        raise DataError(f"Model file {path!r} holds a {saved['task']['kind']!r} fit, not a regression or "
                        f"classification; read it with lo.load_fit, which reads every kind.")
    problems = shape_problems(saved)
    if problems:
        head = (f"Model file {path!r}: {problems[0]}" if len(problems) == 1 else
                f"Model file {path!r} has {len(problems)} problems; it was damaged, edited by hand, or written by "
                f"another program")
        raise DataError(head, problems=problems)
    sealed = intact(saved)                 # judged on the file as written, before any translation
    version = saved["schema_version"]
    t = saved["task"]
    encoding = encoding_from(t.get("encoding"))
    notes = ["loaded from a model file: no training data"]
    renamed = encoding.former_names if encoding is not None and version < 2 else {}
    if renamed:
        saved = _translated(saved, renamed, path)
        encoding = dataclasses.replace(encoding, names=_renamed(encoding.names, renamed))
        t = saved["task"]
        notes.append("written with schema 1: encoded levels renamed from column=level to column.level")
    names = tuple(t["features"])
    labels = tuple(t["labels"]) if t.get("labels") is not None else None
    d = len(names)
    source = t.get("offset")
    ds = Dataset(np.zeros((0, d)), np.zeros(0), np.zeros(0), names, None, encoding, labels, notes,
                 offset_source=None if source is None else (source["kind"], source["column"]))
    loss = _rebuild(t["loss"], _losses, _losses.Loss)
    pens = tuple(_rebuild(p, _penalties, _penalties.Penalty) for p in t["penalties"])
    task = (task_type or Problem)(ds, t["kind"], loss, bool(t["intercept"]), t.get("target"), pens,
                                  tuple(from_plain(r) for r in t["rules"]))
    ev = saved["evidence"]
    if ev.get("status") not in {s.value for s in Status}:
        raise DataError(f"Model file {path!r}: evidence.status is {ev.get('status')!r}; a fit's status is one of "
                        f"{', '.join(s.value for s in Status)}.")
    coef = pd.Series([_float(saved["coef"][n]) for n in names], index=list(names), name="coef", dtype=float)
    status, message = ev["status"], ev["message"]
    if Status(status).has_point:
        bad = [n for n, v in coef.items() if not np.isfinite(v)]
        if bad or not np.isfinite(_float(saved["intercept"])):
            raise DataError(f"Model file {path!r}: {', '.join(bad) or 'the intercept'} "
                            f"{'is' if len(bad) <= 1 else 'are'} not a finite number, but the file says the fit "
                            f"has a point ({status}); the file was damaged or edited by hand.")
    if not sealed:
        status = Status.UNVERIFIED.value
        message = ("loaded from a model file whose content no longer matches the digest written with it (or that "
                   "has none): the saved evidence does not cover these numbers, so the fit is not certified. "
                   f"It said: {ev['message']}")
    return dict(status=status, message=message, objective=_float(ev["objective"]),
                gap=_float(ev["gap"]), rel_gap=_float(ev["rel_gap"]), violation=_float(ev["violation"]),
                coef=coef, intercept=_float(saved["intercept"]),
                prices=pd.Series(ev["prices"], dtype=float), binding=pd.Series(ev["binding"], dtype=bool),
                conflicts=pd.Series(dtype=float),
                timings=Timings(**{k: float(v) for k, v in ev["timings"].items()}),
                solver=ev["solver"], route=ev["route"], attempts=(), certificate=None, task=task,
                extras={"versions": ev.get("versions", {}), "loaded_from": path})
