"""Recipe files: a whole fitting job described in TOML and validated with pydantic.

A recipe names the data (CSV or Parquet, relative to the recipe file), the task (kind,
target, features, weights, loss, penalties, rules, intercept), how to solve, what to do
(solve, compare solvers, walk a path, evaluate on held-out data) and where to write the
outputs. Every problem in a recipe is reported at once, each with its place in the file.
``load_recipe(path)`` returns the same task the Python API builds (tested for every recipe
in ``recipes/``). Needs the ``cli`` extra (pydantic).
"""
from __future__ import annotations

import os
import tomllib
from typing import Literal

from learnopt.core.errors import DataError, LearnoptError, MissingDependencyError

try:
    from pydantic import BaseModel, ConfigDict, Field, ValidationError, model_validator
except ImportError as exc:  # pragma: no cover - exercised only without pydantic
    raise MissingDependencyError("Recipes need pydantic: pip install 'learnopt[cli]'.") from exc


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class DataPart(_Strict):
    path: str = Field(description="CSV or Parquet file, or a pattern of several (sharded data on dask), "
                                  "relative to the recipe file")
    types: dict[str, Literal["number", "category", "text"]] = Field(default_factory=dict)


class LossPart(_Strict):
    name: Literal["squared", "absolute", "huber", "quantile", "epsilon_insensitive", "hinge",
                  "squared_hinge", "logistic"]
    delta: float | None = Field(default=None, gt=0)
    tau: float | None = Field(default=None, gt=0, lt=1)
    eps: float | None = Field(default=None, ge=0)

    @model_validator(mode="after")
    def _parameters_belong(self):
        own = {"huber": "delta", "quantile": "tau", "epsilon_insensitive": "eps"}.get(self.name)
        stray = [k for k in ("delta", "tau", "eps") if getattr(self, k) is not None and k != own]
        if stray:
            raise ValueError(f"the {self.name} loss takes {own or 'no parameters'}; remove {', '.join(stray)}")
        return self

    def build(self):
        from learnopt.terms import losses
        make = getattr(losses, self.name)
        own = {"huber": "delta", "quantile": "tau", "epsilon_insensitive": "eps"}.get(self.name)
        value = getattr(self, own) if own else None
        return make(value) if value is not None else make()


class PenaltyPart(_Strict):
    name: Literal["l1", "l2", "elastic_net", "group", "total_variation"]
    strength: float = Field(ge=0)
    mix: float | None = Field(default=None, ge=0, le=1)
    weights: dict[str, float] | None = None
    groups: list[list[str]] | None = None
    order: list[str] | None = None

    @model_validator(mode="after")
    def _parameters_belong(self):
        needs = {"group": "groups", "total_variation": "order"}.get(self.name)
        if needs and getattr(self, needs) is None:
            raise ValueError(f"the {self.name} penalty needs '{needs}'")
        allowed = {"l1": {"weights"}, "l2": {"weights"}, "elastic_net": {"weights", "mix"},
                   "group": {"groups"}, "total_variation": {"order"}}[self.name]
        stray = [k for k in ("mix", "weights", "groups", "order") if getattr(self, k) is not None and k not in allowed]
        if stray:
            raise ValueError(f"the {self.name} penalty does not take {', '.join(stray)}")
        return self

    def build(self):
        from learnopt.terms import penalties as p
        if self.name == "group":
            return p.group(self.strength, self.groups)
        if self.name == "total_variation":
            return p.total_variation(self.strength, self.order)
        if self.name == "elastic_net":
            return p.elastic_net(self.strength, 0.5 if self.mix is None else self.mix, weights=self.weights)
        return getattr(p, self.name)(self.strength, weights=self.weights)


class TaskPart(_Strict):
    kind: Literal["regression", "classification"]
    target: str
    features: list[str] | None = None
    weights: str | None = None
    intercept: bool = True
    positive: str | int | float | bool | None = None
    loss: LossPart
    penalties: list[PenaltyPart] = Field(default_factory=list)
    rules: list[str] = Field(default_factory=list)


class SolvePart(_Strict):
    solver: Literal["clarabel", "osqp", "scs", "ecos", "highs"] | None = None
    route: Literal["direct", "compressed", "newton", "working-set", "sharded"] | None = None
    tol: float = Field(default=1e-9, gt=0, lt=1)
    gap_tol: float = Field(default=1e-7, gt=0, lt=1)
    feas_tol: float = Field(default=1e-6, gt=0, lt=1)
    time_limit: float | None = Field(default=None, gt=0)
    polish: bool = False
    cluster: str | None = Field(default=None, description="dask scheduler address for sharded data "
                                                          "(default: a local cluster)")


class HoldoutPart(_Strict):
    path: str | None = None
    fraction: float | None = Field(default=None, gt=0, lt=1)
    seed: int = 0

    @model_validator(mode="after")
    def _one_way(self):
        if (self.path is None) == (self.fraction is None):
            raise ValueError("give exactly one of 'path' (a held-out file) or 'fraction' (a random split)")
        return self


class DoPart(_Strict):
    action: Literal["solve", "compare", "path"] = "solve"
    solvers: list[Literal["clarabel", "osqp", "scs", "ecos", "highs"]] = Field(
        default_factory=lambda: ["clarabel", "osqp", "scs", "ecos", "highs"])
    penalty: int = Field(default=0, ge=0)
    grid: list[float] | None = None
    n: int = Field(default=30, ge=2, le=500)
    holdout: HoldoutPart | None = None


class OutputsPart(_Strict):
    fit: str | None = Field(default=None, description="model file (JSON)")
    coefficients: str | None = None
    predictions: str | None = None
    path: str | None = Field(default=None, description="path table (CSV), when the action is path")
    compare: str | None = Field(default=None, description="solver table (CSV), when the action is compare")
    report: str | None = None


class Recipe(_Strict):
    """A validated recipe; paths inside are relative to ``folder``."""

    title: str = ""
    data: DataPart
    task: TaskPart
    solve: SolvePart = Field(default_factory=SolvePart)
    do: DoPart = Field(default_factory=DoPart)
    outputs: OutputsPart = Field(default_factory=OutputsPart)
    folder: str = Field(default=".", exclude=True)

    def resolve(self, relative: str) -> str:
        return relative if os.path.isabs(relative) else os.path.normpath(os.path.join(self.folder, relative))


def _problems(exc: ValidationError) -> list[str]:
    out = []
    for err in exc.errors():
        where = ".".join(str(p) for p in err["loc"]) or "(top level)"
        msg = err["msg"].replace("Value error, ", "")
        if err["type"] == "extra_forbidden":
            msg = "unknown key (check the spelling; see the recipe reference in the README)"
        elif err["type"] == "literal_error":
            msg = f"{msg}; got {err.get('input')!r}"
        out.append(f"{where}: {msg}")
    return out


def read_recipe(path) -> Recipe:
    """Parse and validate a recipe file; every problem is listed in one DataError."""
    path = os.fspath(path)
    try:
        with open(path, "rb") as fh:
            raw = tomllib.load(fh)
    except FileNotFoundError:
        raise DataError(f"Recipe file {path!r} does not exist.") from None
    except tomllib.TOMLDecodeError as exc:
        raise DataError(f"Recipe {path!r} is not valid TOML: {exc}.") from None
    except UnicodeDecodeError:
        raise DataError(f"Recipe {path!r} is not UTF-8 text.") from None
    try:
        return Recipe(**raw, folder=os.path.dirname(os.path.abspath(path)))
    except ValidationError as exc:
        problems = _problems(exc)
        head = f"Recipe {path!r} has {len(problems)} problems" if len(problems) > 1 else \
            f"Recipe {path!r}: {problems[0]}"
        raise DataError(head, problems=problems) from None
    except TypeError as exc:
        raise DataError(f"Recipe {path!r}: {exc}") from None


def _frame(recipe: Recipe):
    """The recipe's data: a pandas DataFrame, or a lazy dask DataFrame for a file pattern."""
    import pandas as pd
    from learnopt.data.table import read_table
    from learnopt.data.sharded import read_glob
    from learnopt.data.gateway import is_sharded_source
    path = recipe.resolve(recipe.data.path)
    frame = read_glob(path) if is_sharded_source(path) else read_table(path)
    for column, kind in recipe.data.types.items():
        if column not in frame.columns:
            raise DataError(f"data.types names {column!r}, which is not a column of {recipe.data.path!r}.")
        if kind == "number":
            frame[column] = (pd.to_numeric(frame[column], errors="raise") if isinstance(frame, pd.DataFrame)
                             else frame[column].astype(float))
        else:
            frame[column] = frame[column].astype(str)
    return frame


def build_task(recipe: Recipe, frame=None):
    """The learnopt task a recipe describes (data read unless ``frame`` is given)."""
    from learnopt.interface.task import classification, regression
    t = recipe.task
    frame = _frame(recipe) if frame is None else frame
    problems, loss, pens = [], None, []
    try:
        loss = t.loss.build()
    except LearnoptError as exc:
        problems.append(f"task.loss: {exc}")
    for k, part in enumerate(t.penalties):
        try:
            pens.append(part.build())
        except LearnoptError as exc:
            problems.append(f"task.penalties.{k}: {exc}")
    if problems:
        raise DataError("The recipe's task cannot be built", problems=problems)
    if t.kind == "regression":
        task = regression(frame, t.target, loss, features=t.features, weights=t.weights, intercept=t.intercept)
    else:
        task = classification(frame, t.target, loss, features=t.features, weights=t.weights,
                              intercept=t.intercept, positive=t.positive)
    if pens:
        task = task.penalize(*pens)
    if t.rules:
        task = task.require(*t.rules)
    return task


def load_recipe(path):
    """The task a recipe file describes (``read_recipe`` gives the whole validated recipe)."""
    return build_task(read_recipe(path))
