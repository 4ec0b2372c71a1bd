"""Recipe files: a whole fitting job described in TOML and validated with pydantic.

A recipe names the data (CSV or Parquet, relative to the recipe file), the task (kind,
target, features, weights, loss, penalties, rules, intercept), how to solve, what to do
(solve, compare solvers, walk a path, evaluate on held-out data) and where to write the
outputs. Every problem in a recipe is reported at once, each with its place in the file, in the
words of ``recipe_errors`` (the key as written, what was found, what to write instead).
``load_recipe(path)`` returns the same task the Python API builds (tested for every recipe
in ``recipes/``). Needs the ``cli`` extra (pydantic).

The allowed names and their keys are read from the registries, not written here: losses and
penalties from ``losses.LOSSES`` / ``penalties.PENALTIES`` (a block's keys are its constructor's
keywords, and the block checks the values itself), solvers and routes from their registries.
Two keys differ from the constructor keywords: total_variation's ``names`` is written ``order``
(next to ``name`` it would read like a typo), and a penalty's per-coefficient ``factors`` were
called ``weights`` before this release (still accepted, with a DeprecationWarning).
"""
from __future__ import annotations

import glob
import os
import tomllib
import warnings
from typing import Any, ClassVar, Literal, Mapping

import pandas as pd

from learnopt.core.errors import DataError, LearnoptError, MissingDependencyError
from learnopt.data.gateway import is_sharded_source, read_source
from learnopt.interface.placing import AreaPart, build_centres, kind_problems
from learnopt.interface.recipe_errors import BlockProblem, KindProblems, problems, place
from learnopt.interface.task import classification, regression
from learnopt.rules.domain import over
from learnopt.solve.routes import ROUTES
from learnopt.solve.solvers import REGISTRY as SOLVERS
from learnopt.terms.losses import KINDS, LOSSES, for_kind
from learnopt.terms.penalties import PENALTIES

try:
    from pydantic import BaseModel, ConfigDict, Field, ValidationError, create_model, model_validator
except ImportError as exc:  # pragma: no cover - exercised only without pydantic
    raise MissingDependencyError("Recipes need pydantic: pip install 'learnopt[cli]'.") from exc
from learnopt.interface.recipe_shapes import ShapePart, apply_shapes   # noqa: E402 - needs pydantic

ACTIONS = ("solve", "compare", "path", "by_group")
LOSS_NAMES = tuple(dict.fromkeys(name for kind in KINDS for name in for_kind(kind)))
KEYS = {"names": "order"}          # constructor keyword -> recipe key, where they differ
OLD_KEYS = {"weights": "factors"}  # penalty keys renamed in this release: old -> new


class _Strict(BaseModel):
    model_config = ConfigDict(extra="forbid", frozen=True)


class DataPart(_Strict):
    path: str = Field(description="CSV or Parquet file, or a pattern of several (sharded data on dask), "
                                  "relative to the recipe file")
    types: dict[str, Literal["number", "category", "text"]] = Field(default_factory=dict)


def _key(parameter: str) -> str:
    return KEYS.get(parameter, parameter)


def _keyword(key: str) -> str:
    return {v: k for k, v in KEYS.items()}.get(key, key)


class _Block(_Strict):
    """A named loss or penalty: ``name`` plus the keys its registry row lists."""

    what: ClassVar[str] = ""
    rows: ClassVar[Mapping] = {}

    def given(self) -> dict:
        """The keys the recipe gives (recipe key -> value)."""
        return {k: v for k, v in self if k != "name" and v is not None}

    @model_validator(mode="after")
    def _fits_the_block(self):
        spec = self.rows[self.name]
        own, given = [_key(p) for p in spec.parameters], self.given()
        stray = [k for k in given if k not in own]
        if stray:
            raise ValueError(f"the {self.name} {self.what} takes {', '.join(own) or 'no parameters'}; "
                             f"remove {', '.join(stray)}")
        missing = [_key(p) for p in spec.required if _key(p) not in given]
        if missing:
            raise ValueError(f"the {self.name} {self.what} needs {', '.join(repr(k) for k in missing)}")
        try:
            self.build()
        except LearnoptError as exc:
            raise BlockProblem(exc, KEYS, given, f"{self.name} {self.what}") from None
        return self

    def build(self):
        """The block, made by its registry row's constructor (which checks the values)."""
        return self.rows[self.name].factory(**{_keyword(k): v for k, v in self.given().items()})


def _block_model(model: str, base: type[_Block]) -> type[_Block]:
    """``base`` with ``name`` limited to its rows and one optional key per registered parameter."""
    keys = dict.fromkeys(_key(p) for spec in base.rows.values() for p in spec.parameters)
    fields = {"name": (Literal[tuple(base.rows)], ...)} | {k: (Any, None) for k in keys}
    return create_model(model, __base__=base, __module__=__name__, **fields)


class _Loss(_Block):
    what: ClassVar[str] = "loss"
    rows: ClassVar[Mapping] = {name: LOSSES[name] for name in LOSS_NAMES}


class _Penalty(_Block):
    what: ClassVar[str] = "penalty"
    rows: ClassVar[Mapping] = PENALTIES

    @model_validator(mode="before")
    @classmethod
    def _old_keys(cls, data):
        if not isinstance(data, dict):
            return data
        for old, new in OLD_KEYS.items():
            if old in data:
                if new in data:
                    raise ValueError(f"give '{new}' only ('{old}' is its old name)")
                warnings.warn(f"The penalty key '{old}' is now called '{new}' (per-coefficient factors, not "
                              f"row weights); '{old}' is still accepted in this release and will be removed "
                              f"in the next one.", DeprecationWarning, stacklevel=1)
                data = {(new if k == old else k): v for k, v in data.items()}
        return data


LossPart = _block_model("LossPart", _Loss)
PenaltyPart = _block_model("PenaltyPart", _Penalty)


class RuleOverPart(_Strict):
    """``[[task.rules_over]]``: a rule on predictions required over a box of feature values,
    ``rule = "prediction >= 0"`` and ``box = { distance_km = [0, 50], region = "every" }``
    (one entry per feature: ``[low, high]``, one value, a level, a list of levels or "every")."""

    rule: str
    box: dict[str, Any]

    @model_validator(mode="after")
    def _builds(self):
        try:
            self.build()
        except LearnoptError as exc:
            raise ValueError(str(exc)) from None
        return self

    def build(self):
        """The rule object (``lo.rule.over``)."""
        return over(self.rule, **self.box)


class TaskPart(_Strict):
    kind: Literal[KINDS + ("centres",)]
    target: str | None = None
    features: list[str] | None = None
    weights: str | None = None
    offset: str | None = Field(default=None, description="regression: a column added to the linear predictor")
    exposure: str | None = Field(default=None, description="regression: a column whose log is the offset")
    intercept: bool = True
    positive: str | int | float | bool | None = None
    reference: str | int | float | bool | None = Field(default=None, description="several classes: the class whose "
                                                                               "coefficients are 0")
    loss: LossPart | None = None          # none: the Python default (squared / logistic)
    penalties: list[PenaltyPart] = Field(default_factory=list)
    rules: list[str] = Field(default_factory=list)
    rules_over: list[RuleOverPart] = Field(default_factory=list, description="rules on predictions over a box")
    shapes: list[ShapePart] = Field(default_factory=list, description="shaped effects of numeric features")
    k: int | None = Field(default=None, ge=1, description="centres: how many")
    fixed: list[list[float]] | None = Field(default=None, description="centres: existing centres, pinned")
    areas: list[AreaPart] = Field(default_factory=list, description="centres: regions a centre must stay in")


class SolvePart(_Strict):
    solver: Literal[tuple(SOLVERS)] | None = None
    route: Literal[ROUTES] | None = None
    tol: float = Field(default=1e-9, gt=0, lt=1)
    gap_tol: float = Field(default=1e-7, gt=0, lt=1)
    feas_tol: float = Field(default=1e-6, gt=0, lt=1)
    time_limit: float | None = Field(default=None, gt=0)
    polish: bool = False
    cluster: str | None = Field(default=None, description="dask scheduler address for sharded data "
                                                          "(default: a local cluster)")
    restarts: int = Field(default=10, ge=1, description="centres: seeded restarts")
    seed: int = Field(default=0, ge=0, description="centres: the first restart's seed")


class HoldoutPart(_Strict):
    path: str | None = None
    fraction: float | None = Field(default=None, gt=0, lt=1)
    seed: int = 0
    groups: str | None = Field(default=None, description="a column of the held-out rows: metrics compared "
                                                          "across its groups")

    @model_validator(mode="after")
    def _one_way(self):
        if (self.path is None) == (self.fraction is None):
            raise ValueError("give exactly one of 'path' (a held-out file) or 'fraction' (a random split)")
        return self


class DoPart(_Strict):
    action: Literal[ACTIONS] = "solve"
    solvers: list[Literal[tuple(SOLVERS)]] = Field(default_factory=lambda: list(SOLVERS))
    penalty: int = Field(default=0, ge=0)
    grid: list[float] | None = None
    n: int = Field(default=30, ge=2, le=500)
    holdout: HoldoutPart | None = None
    by: str | None = Field(default=None, description="by_group: the column whose values are the groups")


class UncertaintyPart(_Strict):
    refits: int = Field(default=0, ge=0, le=20000, description="bootstrap refits (0: none)")
    seed: int = Field(default=0, ge=0)
    level: float = Field(default=0.9, gt=0, lt=1, description="for refit and prediction intervals")
    draw_groups: str | None = Field(default=None, description="column whose groups are drawn whole")
    intervals: bool = Field(default=False, description="prediction intervals calibrated on held-out rows")


class OutputsPart(_Strict):
    fit: str | None = Field(default=None, description="model file (JSON)")
    coefficients: str | None = None
    predictions: str | None = None
    path: str | None = Field(default=None, description="path table (CSV), when the action is path")
    compare: str | None = Field(default=None, description="solver table (CSV), when the action is compare")
    report: str | None = None
    uncertainty: str | None = Field(default=None, description="refit and prediction intervals (JSON)")
    groups: str | None = Field(default=None, description="one fit per group (CSV), when the action is by_group")
    centres: str | None = Field(default=None, description="centres table (CSV), centres recipes")
    assignments: str | None = Field(default=None, description="centre of each point (CSV), centres recipes")


class Recipe(_Strict):
    """A validated recipe; paths inside are relative to ``folder``."""

    title: str = ""
    data: DataPart
    task: TaskPart
    solve: SolvePart = Field(default_factory=SolvePart)
    do: DoPart = Field(default_factory=DoPart)
    uncertainty: UncertaintyPart = Field(default_factory=UncertaintyPart)
    outputs: OutputsPart = Field(default_factory=OutputsPart)
    folder: str = Field(default=".", exclude=True)
    file: str = Field(default="", exclude=True, description="the recipe file read (for the report)")

    @model_validator(mode="after")
    def _keys_of_its_kind(self):
        problems = kind_problems(self.task, self.solve, self.outputs, self.do) + self._uncertainty_problems()
        if problems:
            raise KindProblems(problems)
        return self

    def _uncertainty_problems(self) -> list[str]:
        u, out = self.uncertainty, []
        if (self.do.action == "by_group") != (self.do.by is not None) and self.task.kind != "centres":
            out.append("do.by: the action by_group needs the group column (by = \"store\"), and by is only read "
                       "by that action; give both or neither")
        if self.outputs.groups is not None and self.do.action != "by_group":
            out.append("outputs.groups: only the action by_group writes one fit per group; remove the key or set "
                       "do.action = \"by_group\"")
        if self.outputs.uncertainty is not None and not (u.refits or u.intervals):
            out.append("outputs.uncertainty: nothing to write; give uncertainty.refits or uncertainty.intervals")
        if not u.model_fields_set:
            return out
        if self.task.kind == "centres":
            return ["uncertainty: a centres recipe has no refit or prediction intervals; remove the section"]
        if u.intervals and self.do.holdout is None:
            out.append("uncertainty.intervals: prediction intervals are calibrated on held-out rows; add "
                       "do.holdout (e.g. holdout = { fraction = 0.3, seed = 1 }) or remove the key")
        if u.intervals and self.task.kind != "regression":
            out.append("uncertainty.intervals: prediction intervals are for regression recipes; remove the key")
        if u.draw_groups is not None and not u.refits:
            out.append("uncertainty.draw_groups: it says how refits draw rows, and refits is 0; give refits "
                       "(e.g. refits = 200) or remove the key")
        return out

    def resolve(self, relative: str) -> str:
        return relative if os.path.isabs(relative) else os.path.normpath(os.path.join(self.folder, relative))


def _known_keys() -> set[str]:
    """Every key a recipe may hold: the sections' fields and the building blocks' parameters."""
    keys = set(KEYS.values()) | set(OLD_KEYS)
    stack = [Recipe]
    while stack:
        model = stack.pop()
        for name, info in model.model_fields.items():
            keys.add(name)
            for arg in getattr(info.annotation, "__args__", ()) + (info.annotation,):
                if isinstance(arg, type) and issubclass(arg, BaseModel) and arg not in stack:
                    stack.append(arg)
    for spec in list(LOSSES.values()) + list(PENALTIES.values()):
        keys.update(spec.parameters)
    return keys - set(INTERNAL)


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
        raise DataError(f"Recipe {path!r} is not UTF-8 text; save it as UTF-8.") from None
    except IsADirectoryError:
        raise DataError(f"Recipe {path!r} is a folder; give the path of a .toml recipe file.") from None
    except ValueError as exc:         # an integer of thousands of digits
        raise DataError(f"Recipe {path!r} holds a number too long to read ({str(exc).split(';')[0]}); "
                        f"write it with fewer digits.") from None
    except RecursionError:
        raise DataError(f"Recipe {path!r} nests tables or lists too deeply to be a recipe; a recipe "
                        f"needs a few levels at most.") from None
    return recipe_from(raw, folder=os.path.dirname(os.path.abspath(path)), label=f"Recipe {path!r}",
                       file=os.path.abspath(path))


INTERNAL = ("folder", "file")       # fields learnopt fills in; a recipe that writes them gets a finding


def recipe_from(raw: Mapping, *, folder: str = ".", label: str = "The recipe", file: str = "") -> Recipe:
    """Validate a recipe already read into a mapping (as ``tomllib`` returns it); paths inside
    are relative to ``folder``. Every problem is listed in one DataError, one line each."""
    found = []
    found += [f"{key}: unknown key; remove it (learnopt sets it: paths in a recipe are read relative to the "
              f"recipe file)" for key in INTERNAL if key in raw]
    try:
        recipe = Recipe(**{k: v for k, v in raw.items() if k not in INTERNAL}, folder=folder, file=file)
    except ValidationError as exc:
        found += problems(exc, Recipe, _known_keys())
    if found:
        head = f"{label} has {len(found)} problems" if len(found) > 1 else f"{label}: {found[0]}"
        raise DataError(head, problems=found) from None
    return recipe


def read_from(recipe: Recipe, relative: str, key: str):
    """The table a recipe key names; a missing file is reported with the key and the recipe's
    folder, which is where a relative path is read from."""
    path = recipe.resolve(relative)
    missing = not glob.glob(path) if is_sharded_source(path) else not os.path.exists(path)
    if missing:
        where = "" if os.path.isabs(relative) else f" (a relative path is read from the recipe's folder {recipe.folder!r})"
        raise DataError(f"{key} = {relative!r}: no file {'matches' if is_sharded_source(path) else 'at'} "
                        f"{path!r}{where}.")
    return read_source(path)


def _frame(recipe: Recipe):
    """The recipe's data: a pandas DataFrame, or a lazy dask DataFrame for a file pattern."""
    frame = read_from(recipe, recipe.data.path, "data.path")
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
    t = recipe.task
    frame = _frame(recipe) if frame is None else frame
    if t.kind == "centres":
        return build_centres(t, frame)
    wrong, loss, pens = [], None, []
    try:
        loss = t.loss.build() if t.loss is not None else ("squared" if t.kind == "regression" else "logistic")
    except LearnoptError as exc:
        wrong.append(f"task.loss: {exc}")
    for k, part in enumerate(t.penalties):
        try:
            pens.append(part.build())
        except LearnoptError as exc:
            wrong.append(f"{place(['task', 'penalties', k])}: {exc}")
    if wrong:
        raise DataError("The recipe's task cannot be built", problems=wrong)
    if t.kind == "regression":
        task = regression(frame, t.target, loss, features=t.features, weights=t.weights, intercept=t.intercept,
                          offset=t.offset, exposure=t.exposure)
    elif t.offset is not None or t.exposure is not None:
        raise DataError(f"task.{'offset' if t.offset is not None else 'exposure'}: an offset or exposure belongs to "
                        f"a regression task (kind = \"regression\"); remove the key from this {t.kind} task.")
    else:
        task = classification(frame, t.target, loss, features=t.features, weights=t.weights,
                              intercept=t.intercept, positive=t.positive, reference=t.reference)
    task = apply_shapes(task, t.shapes)
    if pens:
        task = task.penalize(*pens)
    if t.rules:
        task = task.require(*t.rules)
    return _require_over(task, t.rules_over)


def _require_over(task, parts):
    """The ``[[task.rules_over]]`` entries required, each refusal named by its place in the recipe."""
    wrong = []
    for k, part in enumerate(parts):
        try:
            task = task.require(part.build())
        except LearnoptError as exc:
            wrong.append(f"{place(['task', 'rules_over', k])}: {exc}")
    if wrong:
        raise DataError(wrong[0] if len(wrong) == 1 else "The recipe's rules over a box cannot be used",
                        problems=wrong)
    return task


def load_recipe(path):
    """The task a recipe file describes (``read_recipe`` gives the whole validated recipe)."""
    return build_task(read_recipe(path))
