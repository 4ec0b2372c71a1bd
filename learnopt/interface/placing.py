"""Centres in recipes: the ``[[task.areas]]`` tables, the checks that keep centres keys and
regression keys apart, building the centres task, and its outputs.

A centres recipe says ``kind = "centres"`` and gives ``k`` (and optionally ``features``,
``weights``, ``fixed`` and ``rules``, where a rule may start with ``centre 2:``). Areas are
tables with exactly one shape: ``polygon = [[x, y], ...]`` (convex, vertices in order),
``segment = [[x, y], [x, y]]``, or ``around = [x, y]`` with ``radius = r`` (a disc); each may
name ``features`` (default: the task's coordinates) and ``centre`` (default: every centre).
"""
from __future__ import annotations

import pandas as pd
from pydantic import BaseModel, ConfigDict, model_validator

from learnopt.centres.placement import centres
from learnopt.core.errors import DataError
from learnopt.core.files import write_atomic
from learnopt.rules.regions import ball, polygon, segment

CENTRES_ONLY = ("k", "fixed", "areas")               # task keys that only a centres recipe takes
FITS_ONLY = ("target", "loss", "penalties", "positive", "intercept", "rules_over", "shapes")
FIT_OUTPUTS = ("coefficients", "predictions", "path", "compare")
CENTRES_OUTPUTS = ("centres", "assignments")


class AreaPart(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    polygon: list[tuple[float, float]] | None = None
    segment: tuple[tuple[float, ...], tuple[float, ...]] | None = None
    around: list[float] | None = None
    radius: float | None = None
    features: list[str] | None = None
    centre: int | None = None

    @model_validator(mode="after")
    def _one_shape(self):
        shapes = [k for k in ("polygon", "segment", "around") if getattr(self, k) is not None]
        if len(shapes) != 1:
            raise ValueError("give exactly one shape: 'polygon', 'segment', or 'around' with 'radius'"
                             + (f" (this area gives {', '.join(shapes)})" if shapes else ""))
        if (self.around is None) != (self.radius is None):
            raise ValueError("'around' (a disc's middle) and 'radius' go together")
        return self

    def rule(self, names):
        where = tuple(self.features or names)
        if self.polygon is not None:
            return polygon(self.polygon, features=where)
        if self.segment is not None:
            return segment(*self.segment, features=where)
        return ball(self.around, self.radius, features=where)


def kind_problems(recipe_task, solve, outputs, do) -> list[str]:
    """Keys given for the other kind of recipe (each named, with the fix)."""
    given = recipe_task.model_fields_set
    out = []
    if recipe_task.kind == "centres":
        out += [f"task.{k}: a centres recipe has no {k}; remove it" for k in FITS_ONLY if k in given]
        if recipe_task.k is None:
            out.append("task.k: a centres recipe needs k, the number of centres (e.g. k = 4)")
        out += [f"outputs.{k}: a centres recipe writes centres and assignments, not {k}; remove it"
                for k in FIT_OUTPUTS if getattr(outputs, k) is not None]
        if do.action != "solve":
            out.append(f"do.action: a centres recipe only solves (got {do.action!r}); remove the key")
    else:
        if "target" not in given:
            out.append(f"task.target: a {recipe_task.kind} recipe needs the target column (e.g. target = \"price\")")
        out += [f"task.{k}: only a centres recipe takes {k}; remove it" for k in CENTRES_ONLY if k in given]
        out += [f"outputs.{k}: only a centres recipe writes {k}; use coefficients or predictions"
                for k in CENTRES_OUTPUTS if getattr(outputs, k) is not None]
        out += [f"solve.{k}: only a centres recipe takes {k}; remove it"
                for k in ("restarts", "seed") if k in solve.model_fields_set]
    return out


def build_centres(t, frame):
    """The centres task a recipe's ``[task]`` describes, on ``frame``."""
    task = centres(frame, k=t.k, weights=t.weights, features=t.features, fixed=t.fixed)
    if t.rules:
        task = task.require(*t.rules)
    for area in t.areas:
        try:
            task = task.require(area.rule(task.names), centre=area.centre)
        except DataError as exc:
            raise DataError(f"task.areas: {exc}") from None
    return task


def write_centres(job, frame, written) -> None:
    """The centres recipe's outputs: model file, centres table, assignments (each atomically)."""
    out, fit, recipe = job.recipe.outputs, job.fit, job.recipe
    if out.fit:
        path = recipe.resolve(out.fit)
        fit.save(path, run=job.run_id)
        written.append(path)
    if out.centres:
        path = recipe.resolve(out.centres)
        write_atomic(path, fit.centres.join(fit.loads).to_csv())
        written.append(path)
    if out.assignments:
        path = recipe.resolve(out.assignments)
        if isinstance(frame, pd.DataFrame):
            write_atomic(path, pd.DataFrame({"centre": fit.labels}).to_csv(index_label="row"))
        else:
            write_atomic(path, csv_chunks(fit.labels, "centre"))
        written.append(path)


def csv_chunks(lazy, column: str):
    """CSV text of a lazy dask Series, one partition at a time (rows numbered across partitions)."""
    start = 0
    for k, part in enumerate(lazy.to_delayed()):
        values = part.compute()
        chunk = pd.DataFrame({column: values.to_numpy()}, index=pd.RangeIndex(start, start + len(values)))
        start += len(values)
        yield chunk.to_csv(index_label="row", header=k == 0)
