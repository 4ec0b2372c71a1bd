"""``[[task.shapes]]`` in a recipe: one shaped feature per entry (``task.shape``)::

    [[task.shapes]]
    feature = "distance_km"
    shape = "increasing concave"     # one or two of increasing, decreasing, convex, concave
    pieces = 8                       # optional (default 8)
    form = "lines"                   # optional: "lines" (spline) or "steps"

Shapes are applied before the recipe's penalties and rules.
"""
from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, ConfigDict, Field, model_validator

from learnopt.core.errors import DataError, LearnoptError
from learnopt.interface.recipe_errors import place
from learnopt.rules.shapes import read_words


class ShapePart(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)

    feature: str
    shape: str
    pieces: int = Field(default=8, ge=2)
    form: Literal["lines", "steps"] = "lines"

    @model_validator(mode="after")
    def _words(self):
        try:
            read_words(self.feature, self.shape, self.form)
        except LearnoptError as exc:
            raise ValueError(str(exc)) from None
        return self


def apply_shapes(task, parts):
    """The task with every ``[[task.shapes]]`` entry applied, each refusal named by its place."""
    wrong = []
    for k, part in enumerate(parts):
        try:
            task = task.shape(part.feature, part.shape, pieces=part.pieces, form=part.form)
        except LearnoptError as exc:
            wrong.append(f"{place(['task', 'shapes', k])}: {exc}")
    if wrong:
        raise DataError(wrong[0] if len(wrong) == 1 else "The recipe's shapes cannot be used", problems=wrong)
    return task
