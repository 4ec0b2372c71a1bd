"""Recipe problems in learnopt's own words.

The recipe schema is checked by pydantic; this module turns each of its findings into one line
that names the key as it is written in the TOML file (``task.loss.delta``,
``task.penalties[1].name``), says what was found there and what to write instead:

    solve.tol: found 5; it has to be a number between 0 and 1
    task.kind: found the text "ranking"; it has to be one of "regression", "classification"
    task.target: missing; add target under [task] (text in quotes)
    data.colour: unknown key; remove it or fix its spelling (the README lists every recipe key)

What a key has to be is read from the schema itself (its type, its choices, its bounds), so the
words follow the schema. A building block that refuses its values (``huber`` with a negative
``delta``) reports through :class:`BlockProblem`, in the same shape. No line repeats the
validation library's own wording.
"""
from __future__ import annotations

import datetime
import json
import math
import re
import types
import typing
from collections.abc import Mapping

from learnopt.core.checks import LONGEST, Interval
from learnopt.core.errors import LearnoptError, MissingDependencyError
from learnopt.terms.losses import LOSSES, by_name
from learnopt.core.checks import nearest

try:
    from pydantic import BaseModel, ValidationError
except ImportError as exc:  # pragma: no cover - exercised only without pydantic
    raise MissingDependencyError("Recipes need pydantic: pip install 'learnopt[cli]'.") from exc

# the validation library's error types, by what the key should have held
NEEDS = {
    "number": {"float_type", "float_parsing", "finite_number", "decimal_type", "decimal_parsing"},
    "whole number": {"int_type", "int_parsing", "int_from_float", "int_parsing_size"},
    "text": {"string_type", "string_unicode", "string_sub_type"},
    "true or false": {"bool_type", "bool_parsing"},
    "list": {"list_type", "tuple_type", "set_type", "frozen_set_type", "iterable_type"},
    "table": {"model_type", "model_attributes_type", "dict_type", "mapping_type", "dataclass_type"},
}
RANGE = {"greater_than", "greater_than_equal", "less_than", "less_than_equal", "multiple_of"}
LENGTH = {"too_short", "too_long"}
CHOICE = {"literal_error", "enum"}
OWN = {"value_error", "assertion_error"}       # raised by the schema's own validators, in our words
BARE = re.compile(r"[A-Za-z0-9_-]+")


class BlockProblem(ValueError):
    """A building block (loss, penalty) refused its values: one (recipe key, text) pair per problem.

    ``keys`` maps a constructor keyword to its recipe key where they differ; ``given`` holds the
    block's keys as the recipe wrote them; ``block`` names it ("huber loss").
    """

    def __init__(self, exc: LearnoptError, keys: Mapping[str, str], given: Mapping, block: str):
        names = [keys.get(p, p) for p in getattr(exc, "parameters", ())]
        demands = getattr(exc, "demands", ())
        if names and len(names) == len(demands):
            self.pairs = [(key, f"found {found(given[key])}; it has to be {demand} ({block})" if key in given
                           else f"it has to be {demand} ({block})") for key, demand in zip(names, demands)]
        elif len(names) == len(exc.problems):
            self.pairs = list(zip(names, exc.problems))
        else:
            self.pairs = [(None, str(exc))]
        super().__init__(str(exc))


# ---------------------------------------------------------------- values as TOML writes them
def toml(value) -> str:
    """A value as it would be written in the recipe file (cut to a readable length)."""
    return _cut(_toml(value))


def _toml(value) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, str):
        return json.dumps(value, ensure_ascii=False)
    if isinstance(value, float) and not math.isfinite(value):
        return "nan" if math.isnan(value) else ("inf" if value > 0 else "-inf")
    if isinstance(value, (int, float)):
        return repr(value)
    if isinstance(value, Mapping):
        return "{ " + ", ".join(f"{_bare(k)} = {_toml(v)}" for k, v in value.items()) + " }" if value else "{}"
    if isinstance(value, (list, tuple)):
        return "[" + ", ".join(_toml(v) for v in value) + "]"
    if isinstance(value, (datetime.date, datetime.time)):
        return value.isoformat()
    return repr(value)


def _cut(text: str) -> str:
    return text if len(text) <= LONGEST else text[: LONGEST - 3] + "..."


def _bare(key) -> str:
    key = str(key)
    return key if BARE.fullmatch(key) else json.dumps(key, ensure_ascii=False)


def found(value) -> str:
    """What was found, with its kind when the TOML spelling alone could mislead ("5" vs 5)."""
    kind = ("the text " if isinstance(value, str) else "the list " if isinstance(value, (list, tuple)) else
            "the table " if isinstance(value, Mapping) else
            "the date " if isinstance(value, (datetime.date, datetime.time)) else "")
    return kind + toml(value)


def place(parts) -> str:
    """Key parts as written in the file: ``task.penalties[1].name``."""
    out = ""
    for p in parts:
        out += f"[{p}]" if isinstance(p, int) else ("." if out else "") + _bare(p)
    return out or "(the whole recipe)"


# ---------------------------------------------------------------- what the schema expects
def _members(annotation) -> list:
    """The members of a union, None left out (a TOML file cannot write None)."""
    if typing.get_origin(annotation) in (typing.Union, types.UnionType):
        return [a for a in typing.get_args(annotation) if a is not type(None)]
    return [annotation]


def _model(annotation):
    models = [a for a in _members(annotation) if isinstance(a, type) and issubclass(a, BaseModel)]
    return models[0] if len(models) == 1 else None


def _item(annotation):
    for a in _members(annotation):
        if typing.get_origin(a) in (list, tuple, set):
            return (typing.get_args(a) or (typing.Any,))[0]
    return None


def walk(root: type[BaseModel], loc) -> tuple[list, object, object]:
    """Follow a location through the schema: (key parts as written, annotation, field info).

    A location may hold tags naming one member of a union (``positive`` may be text, a number
    or true/false); they are not part of the key and are skipped.
    """
    model, annotation, info, parts = root, None, None, []
    for p in loc:
        if isinstance(p, int):
            parts.append(p)
            annotation, info = _item(annotation), None
        elif model is not None:
            parts.append(p)
            info = model.model_fields.get(p)
            annotation = info.annotation if info is not None else None
        elif any(typing.get_origin(a) is dict for a in _members(annotation)):
            parts.append(p)
            annotation = next(typing.get_args(a)[1] for a in _members(annotation) if typing.get_origin(a) is dict)
            info = None
        else:
            continue
        model = _model(annotation)
    return parts, annotation, info


def _bounds(info) -> Interval | None:
    marks = {type(m).__name__: m for m in getattr(info, "metadata", ())}
    low = marks.get("Gt") or marks.get("Ge")
    high = marks.get("Lt") or marks.get("Le")
    if low is None and high is None:
        return None
    return Interval(None if low is None else getattr(low, "gt", getattr(low, "ge", None)),
                    None if high is None else getattr(high, "lt", getattr(high, "le", None)),
                    closed_low="Gt" not in marks, closed_high="Lt" not in marks)


def choices(annotation) -> tuple:
    for a in _members(annotation):
        if typing.get_origin(a) is typing.Literal:
            return typing.get_args(a)
    return ()


def expected(annotation, info=None) -> str | None:
    """What a key of this annotation has to hold, in words; None when the schema does not say."""
    if annotation is None or annotation is typing.Any:
        return None
    members = _members(annotation)
    if len(members) > 1:
        words = [expected(m) for m in members]
        if "a number" in words and "a whole number" in words:
            words.remove("a whole number")
        words = [w.replace("true or false", "true/false") for w in dict.fromkeys(w for w in words if w)]
        return ", ".join(words[:-1]) + " or " + words[-1] if len(words) > 1 else (words[0] if words else None)
    a = members[0]
    interval = _bounds(info)
    if typing.get_origin(a) is typing.Literal:
        return "one of " + ", ".join(toml(c) for c in typing.get_args(a))
    if typing.get_origin(a) in (list, tuple, set):
        inner = expected(_item(a))
        return "a list in brackets" + (f", each item {inner}" if inner else "")
    if typing.get_origin(a) is dict:
        inner = expected(typing.get_args(a)[1])
        return "a table of key = value pairs" + (f", each value {inner}" if inner else "")
    if isinstance(a, type) and issubclass(a, BaseModel):
        return "a table"
    words = {bool: "true or false", str: "text in quotes", int: "a whole number", float: "a number"}.get(a)
    if words in ("a number", "a whole number") and interval is not None:
        return f"{words} {interval.describe()}"
    return words


def _range(ctx: Mapping) -> str:
    """A bound the schema names only in the finding itself (no field type to read it from)."""
    if "multiple_of" in ctx:
        return f"a multiple of {ctx['multiple_of']}"
    return Interval(ctx.get("gt", ctx.get("ge")), ctx.get("lt", ctx.get("le")),
                    closed_low="gt" not in ctx, closed_high="lt" not in ctx).describe()


def _table_fix(parts, value, annotation) -> str:
    """How to write a table at this place: a section header, or inline braces."""
    dotted = ".".join(str(p) for p in parts if not isinstance(p, int))
    header = f"[[{dotted}]] entry" if parts and isinstance(parts[-1], int) else f"[{dotted}] section"
    model = _model(annotation)
    if isinstance(value, str) and model is not None and "name" in model.model_fields:
        return f"write it as a {header} with name = {toml(value)}, or inline: {{ name = {toml(value)} }}"
    return f"write it as a {header} with its keys below it, or inline: {{ key = value, ... }}"


class KindProblems(ValueError):
    """Keys that belong to the other kind of recipe, each already a ``section.key: ...`` line."""

    def __init__(self, problems: list[str]):
        self.problems = problems
        super().__init__("; ".join(problems))


# ---------------------------------------------------------------- one line per finding
def _line(err: dict, root: type[BaseModel], known_keys) -> list[str]:
    kind, value = err["type"], err.get("input")
    parts, annotation, info = walk(root, err["loc"])
    where = place(parts)
    raised = (err.get("ctx") or {}).get("error")
    if isinstance(raised, KindProblems):
        return list(raised.problems)
    if isinstance(raised, BlockProblem):
        return [f"{place(parts + [key])}: {text}" if key else f"{where}: {text}" for key, text in raised.pairs]
    if kind in OWN:
        return [f"{where}: {raised if raised is not None else 'this value is not accepted here'}"]
    if kind == "missing":
        section = parts[:-1]
        if not section:
            model = _model(annotation)
            needs = [n for n, f in model.model_fields.items() if f.is_required()] if model is not None else []
            return [f"{where}: missing; add a [{where}] section" + (f" with at least {', '.join(needs)}" if needs
                                                                     else "")]
        dotted = ".".join(str(p) for p in section if not isinstance(p, int))
        home = f"this [[{dotted}]] entry" if isinstance(section[-1], int) else f"[{dotted}]"
        what = expected(annotation, info)
        return [f"{where}: missing; add {parts[-1]} under {home}" + (f" ({what})" if what else "")]
    if kind == "extra_forbidden":
        hint = nearest(parts[-1], sorted(known_keys), n=1, cutoff=0.75)
        return [f"{where}: unknown key{hint}; remove it or fix its spelling (the README lists every recipe key)"]
    if kind in CHOICE:
        options = choices(annotation) or tuple(re.findall(r"'([^']*)'", str((err.get("ctx") or {}).get("expected"))))
        if parts[-2:] == ["loss", "name"] and value in LOSSES and not by_name(value).convex:
            return [f"{where}: {by_name(value).refusal()}"]      # the same explanation Python gives
        hint = nearest(value, options, n=1, show=toml) if isinstance(value, str) else ""
        return [f"{where}: found {found(value)}; it has to be one of {', '.join(toml(o) for o in options)}{hint}"]
    if kind in LENGTH:
        ctx = err.get("ctx") or {}
        size = f"at least {ctx['min_length']}" if kind == "too_short" else f"at most {ctx.get('max_length')}"
        return [f"{where}: found {found(value)}; it has to hold {size} items"]
    needs = next((need for need, kinds in NEEDS.items() if kind in kinds), None)
    what = expected(annotation, info)
    if needs == "table":
        return [f"{where}: found {found(value)}; it has to be a table: {_table_fix(parts, value, annotation)}"]
    if needs is not None:
        words = what or {"text": "text in quotes", "list": "a list in brackets"}.get(needs, f"a {needs}")
        return [f"{where}: found {found(value)}; it has to be {words}"]
    if kind in RANGE:
        return [f"{where}: found {found(value)}; it has to be {what or _range(err.get('ctx') or {})}"]
    if what is not None:                                             # anything else the schema refuses
        return [f"{where}: found {found(value)}; it has to be {what}"]
    return [f"{where}: found {found(value)}, which this key does not take; the README's recipe reference "
            f"says what it holds"]


def problems(exc: ValidationError, root: type[BaseModel], known_keys) -> list[str]:
    """Every finding of the schema check, one line each, in file order; repeats merged."""
    out = []
    for err in exc.errors():
        out += _line(err, root, known_keys)
    return list(dict.fromkeys(out))
