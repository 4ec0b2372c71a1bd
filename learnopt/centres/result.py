"""What a centres placement returns (:class:`CentresFit`), and its model file.

A centres model file is a learnopt model file (format ``learnopt-fit``) whose task kind is
``centres``: the coordinates' names, k, the fixed centres and the rules (each with the centre
it applies to), the centres and loads, and the evidence (status, message, objective, restarts,
violation, seconds, versions). It holds no points; a loaded fit assigns and evaluates new points.
"""
from __future__ import annotations

import json
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from learnopt.core.errors import DataError
from learnopt.core.files import MODEL_FORMAT, MODEL_SCHEMA, json_ready, seal, write_atomic
from learnopt.core.status import PLACEMENT_CAUTION
from learnopt.core.version import package_versions
from learnopt.data.points import assign
from learnopt.rules.saving import to_plain

LOCAL = "local optimum"


@dataclass(repr=False)
class CentresFit:
    """Centres found by alternating exact steps; a local optimum of a non-convex problem.

    Attributes: status ("local optimum"), message, objective (weighted within-cluster sum of
    squares), centres (DataFrame, centres numbered from 1), labels (centre number per point; for
    sharded data a lazy dask Series computed partition by partition; empty for a loaded fit),
    loads (weight and count per centre), iterations, restarts (table), violation, seconds.
    """

    status: str
    message: str
    objective: float
    centres: pd.DataFrame
    labels: np.ndarray
    loads: pd.DataFrame
    iterations: int
    restarts: pd.DataFrame
    violation: float
    seconds: float
    task: object = field(repr=False)
    extras: dict = field(default_factory=dict)

    @classmethod
    def build(cls, task, C, labels, W, counts, value, iters, table, violation, seconds):
        number = pd.Index(np.arange(1, task.k + 1), name="centre")
        frame = pd.DataFrame(C, index=number, columns=list(task.names))
        loads = pd.DataFrame({"weight": W, "points": np.asarray(counts, dtype=int)}, index=number)
        same = int(np.sum(np.isclose(table["objective"], value, rtol=1e-9, atol=0)))
        msg = (f"local optimum: the best of {len(table)} restarts ({same} reached it); each step was solved "
               f"exactly, but placing centres is not a convex problem, so a better placement may exist"
               + (" (k = 1 is convex: this is the global optimum)" if task.k == 1 else ""))
        return cls(LOCAL, msg, value, frame, labels, loads, iters, table, violation, seconds, task)

    @property
    def ok(self) -> bool:
        """A placement learnopt stands behind: a local optimum whose centres keep every rule."""
        return self.status == LOCAL and self.violation <= 1e-6 * max(1.0, float(np.abs(self.centres.to_numpy()).max()))

    def assign(self, points) -> np.ndarray:
        """Centre number (from 1) of the nearest centre for each new point."""
        X = _points(self.task, points)
        return assign(X, self.centres.to_numpy())[0] + 1

    def evaluate(self, points, weights=None) -> pd.Series:
        """Weighted sum and mean of squared distances to the nearest centre on new points."""
        X = _points(self.task, points)
        w = np.ones(len(X)) if weights is None else np.asarray(weights, float).ravel()
        if w.shape != (len(X),) or not np.all(np.isfinite(w)) or np.any(w < 0) or w.sum() <= 0:
            raise DataError("evaluate(weights=...): give one finite non-negative weight per point, not all zero.")
        d2 = assign(X, self.centres.to_numpy())[1]
        return pd.Series({"n": float(len(X)), "objective": float(w @ d2),
                          "mean_squared_distance": float(np.average(d2, weights=w)),
                          "rms_distance": float(np.sqrt(np.average(d2, weights=w)))})

    def save(self, path, *, run: str | None = None) -> None:
        """Write this placement to a JSON model file (atomically; no pickle); read it with ``lo.load_fit``.
        ``run`` (a recipe run's identifier) is written inside, covered by the file's digest."""
        write_atomic(path, json.dumps(seal(self.to_dict(run=run)), indent=1))

    def to_dict(self, *, run: str | None = None) -> dict:
        """The model file's content (JSON-ready), stamped with ``run`` when given."""
        task = self.task
        return {
            "format": MODEL_FORMAT, "schema_version": MODEL_SCHEMA, **({"run": run} if run else {}),
            "task": {"kind": "centres", "coordinates": list(task.names), "k": int(task.k),
                     "fixed": [list(c) for c in task.fixed],
                     "rules": [{"centre": p.centre, **to_plain(p.spec)} for p in task.rules]},
            "centres": [[json_ready(v) for v in row] for row in self.centres.to_numpy()],
            "loads": {"weight": [json_ready(v) for v in self.loads["weight"]],
                      "points": [int(v) for v in self.loads["points"]]},
            "evidence": {"status": self.status, "message": self.message, "objective": json_ready(self.objective),
                         "iterations": int(self.iterations), "violation": json_ready(self.violation),
                         "seconds": json_ready(self.seconds),
                         "restarts": [{k: json_ready(v) for k, v in row.items()}
                                      for row in self.restarts.reset_index().to_dict("records")],
                         "versions": package_versions({p: p for p in ("learnopt", "numpy", "cvxpy")})},
        }

    # ---- display
    def summary(self) -> str:
        table = self.centres.join(self.loads).to_string(float_format=lambda v: f"{v:.6g}")
        return "\n".join([f"status     {self.status} ({self.message})", f"objective  {self.objective:.10g}",
                          f"violation  {self.violation:.3g} (absolute)", table, PLACEMENT_CAUTION])

    def __repr__(self) -> str:
        return (f"CentresFit(status={self.status!r}, objective={self.objective:.8g}, k={len(self.centres)}, "
                f"restarts={len(self.restarts)}, violation={self.violation:.3g})")


def _points(task, points) -> np.ndarray:
    if isinstance(points, pd.DataFrame):
        missing = [c for c in task.names if c not in points.columns]
        if missing:
            raise DataError(f"The new points lack column(s) {', '.join(map(repr, missing))}; they need "
                            f"{', '.join(map(repr, task.names))}.")
        X = _numbers(lambda: points[list(task.names)].to_numpy(dtype=float), task)
    else:
        X = _numbers(lambda: np.asarray(points, dtype=float), task)
        if X.ndim != 2 or X.shape[1] != len(task.names):
            raise DataError(f"The new points must have {len(task.names)} coordinates each "
                            f"({', '.join(task.names)}); got shape {X.shape}.")
    if not np.all(np.isfinite(X)):
        row = int(np.flatnonzero(~np.all(np.isfinite(X), axis=1))[0])
        raise DataError(f"The new points have missing or infinite coordinates (first at row {row}); drop or fill them.")
    return X


def _numbers(convert, task) -> np.ndarray:
    try:
        return convert()
    except (TypeError, ValueError):
        raise DataError(f"The new points' coordinates ({', '.join(task.names)}) must be numbers; "
                        f"some are text or other values.") from None
