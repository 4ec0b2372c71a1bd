"""Model files of fits with several classes: the same JSON form as :mod:`learnopt.solve.fitfile`
(format, schema version, digest), with one coefficient per feature and class.

A loaded fit predicts exactly what the saved one did (floats are written in their shortest
round-trip form); its task is a description with no training data.
"""
from __future__ import annotations

import json
import os

import numpy as np
import pandas as pd

from learnopt.core.errors import DataError
from learnopt.core.files import MODEL_FORMAT, MODEL_SCHEMA, intact, json_ready, read_model, seal, write_atomic
from learnopt.core.status import Status
from learnopt.data.table import Dataset
from learnopt.problem.classes import ClassesProblem, ClassRule
from learnopt.rules.saving import file_entry, from_plain
from learnopt.solve.fitfile import _float, _piece, _rebuild, _versions, encoding_entry, encoding_from
from learnopt.solve.timings import Timings
from learnopt.terms import class_losses, penalties


def to_dict(fit, *, run: str | None = None) -> dict:
    """The model file's content (JSON-ready) of a :class:`~learnopt.solve.classes_fit.ClassesFit`."""
    task = fit.task
    ds = task.dataset
    return {
        "format": MODEL_FORMAT, "schema_version": MODEL_SCHEMA, **({"run": run} if run else {}),
        "task": {"kind": "classes", "loss": _piece(task.loss), "penalties": [_piece(p) for p in task.penalties],
                 "rules": [{"rule": file_entry(r.spec), "class": json_ready(r.label)} for r in task.rules],
                 "intercept": task.intercept, "target": json_ready(task.target_name), "features": list(ds.names),
                 "labels": json_ready(list(task.labels)), "reference": json_ready(task.reference),
                 "encoding": encoding_entry(ds.encoding)},
        "coef": {str(k): [json_ready(float(v)) for v in fit.coef[label]] for k, label in
                 zip(range(len(task.labels)), task.labels)},
        "intercept": [json_ready(float(v)) for v in fit.intercept],
        "evidence": {"status": fit.status, "message": fit.message, "objective": json_ready(fit.objective),
                     "gap": json_ready(fit.gap), "rel_gap": json_ready(fit.rel_gap),
                     "violation": json_ready(fit.violation), "solver": fit.solver, "route": fit.route,
                     "identification": fit.identification, "timings": fit.timings.as_dict(),
                     "prices": json_ready(fit.prices.to_dict()), "binding": json_ready(fit.binding.to_dict()),
                     "versions": _versions(fit.solver)},
    }


def save(fit, path, *, run: str | None = None) -> None:
    """Write the fit to ``path`` as JSON, atomically."""
    write_atomic(path, json.dumps(seal(to_dict(fit, run=run)), indent=1))


def read(path, *, task_type=ClassesProblem) -> dict:
    """The fields (keyword arguments of ClassesFit) of the fit :func:`save` wrote; refused with the
    reason when the file is not whole."""
    path = os.fspath(path)
    saved = read_model(path)
    try:
        t, ev = saved["task"], saved["evidence"]
        names, labels = tuple(t["features"]), tuple(t["labels"])
        coef = pd.DataFrame({label: [_float(v) for v in saved["coef"][str(k)]] for k, label in enumerate(labels)},
                            index=list(names))
        intercept = pd.Series([_float(v) for v in saved["intercept"]], index=list(labels))
        loss = _rebuild(t["loss"], class_losses, class_losses.ClassLoss)
        pens = tuple(_rebuild(p, penalties, penalties.Penalty) for p in t["penalties"])
        rules = tuple(ClassRule(from_plain(r["rule"]), r["class"]) for r in t["rules"])
        status = Status(ev["status"])
    except (KeyError, TypeError, ValueError, IndexError) as exc:
        raise DataError(f"Model file {path!r} is not a whole fit with several classes ({type(exc).__name__}: "
                        f"{exc}); it was damaged, edited by hand, or written by another program.") from None
    if status.has_point and not (np.isfinite(coef.to_numpy()).all() and np.isfinite(intercept.to_numpy()).all()):
        raise DataError(f"Model file {path!r}: a coefficient is not a finite number, but the file says the fit has "
                        f"a point ({status}); the file was damaged or edited by hand.")
    message = ev["message"]
    if not intact(saved):
        status = Status.UNVERIFIED
        message = ("loaded from a model file whose content no longer matches the digest written with it: the saved "
                   f"evidence does not cover these numbers, so the fit is not certified. It said: {message}")
    ds = Dataset(np.zeros((0, len(names))), np.zeros(0), np.zeros(0), names, None, encoding_from(t.get("encoding")),
                 labels, ["loaded from a model file: no training data"])
    task = task_type(ds, loss, bool(t["intercept"]), t.get("target"), t.get("reference"), pens, rules)
    return dict(status=status, message=message, objective=_float(ev["objective"]), gap=_float(ev["gap"]),
                      rel_gap=_float(ev["rel_gap"]), violation=_float(ev["violation"]), coef=coef, intercept=intercept,
                      identification=ev["identification"], prices=pd.Series(ev["prices"], dtype=float),
                      binding=pd.Series(ev["binding"], dtype=bool),
                      timings=Timings(**{k: float(v) for k, v in ev["timings"].items()}), solver=ev["solver"],
                      route=ev["route"], task=task)
