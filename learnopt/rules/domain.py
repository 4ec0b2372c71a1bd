"""A rule on predictions required over a box of feature values, not only on the training rows
(``lo.rule.over``).

``over("prediction >= 0", distance_km=(0, 50), stops=(0, 4), region="every")`` asks that the
rule hold for every x with 0 <= distance_km <= 50, 0 <= stops <= 4 and any level of region.

Why this is exact. The prediction x.w + b is linear in x, and a linear function's smallest and
largest values over a box are taken at corners of the box (a linear program's optimum is at a
vertex of its feasible set). So requiring the rule at each of the 2^k corners (k = features given
a range) is the same as requiring it at every point of the box. An encoded column adds one term
per level, so the rule holds for a set of levels when it holds at the corners for each of them:
corners times levels. Each corner is one row of a linear requirement ``A theta <= rhs`` over
theta = (coefficients, intercept), the same form as a rule on predictions over data rows.

Every feature of the model has to be covered, by a range ``(low, high)`` or a single value; an
encoded column by one level, a list of levels, or ``"every"`` (all its levels). The rule text may
compare the prediction with numbers and coefficients (``0 <= prediction <= 100``,
``prediction >= 2 * cost`` where ``cost`` names a coefficient); it may not have a ``where`` (the
box takes its place: give the level or the narrower range in the box), nor ``mean``, ``sum`` or
norms (they would mix the corners). Boxes with more than :data:`LIMIT` corners are refused.

>>> import learnopt as lo
>>> lo.rule.over("prediction >= 0", distance_km=(0, 50), stops=(0, 4), region="every").text
'prediction >= 0 over 0 <= distance_km <= 50, 0 <= stops <= 4, every region'
"""
from __future__ import annotations

import ast
import itertools
import math
from dataclasses import dataclass, replace
from numbers import Real

import numpy as np

from learnopt.core.checks import complaint, nearest
from learnopt.core.errors import DataError, ParameterError
from learnopt.rules.language import parse
from learnopt.rules.reading import read, written
from learnopt.rules.requirements import Context, Requirement, RuleSpec

LIMIT = 2 ** 16        # corners (times levels) a box may have: rows of the requirement
EVERY = "every"        # an encoded column's value meaning all of its levels
MIXING = ("mean", "sum", "norm1", "norm2", "abs")


@dataclass(frozen=True)
class Over(RuleSpec):
    """A rule on predictions over a box (see the module's docstring); build it with :func:`over`.

    ``ranges``: (feature, low, high); ``values``: (feature, value); ``levels``: (column, levels);
    ``every``: encoded columns taken at each of their levels.
    """

    rule: str
    ranges: tuple[tuple[str, float, float], ...] = ()
    values: tuple[tuple[str, float], ...] = ()
    levels: tuple[tuple[str, tuple[str, ...]], ...] = ()
    every: tuple[str, ...] = ()

    def __post_init__(self):
        """Refuse fields :func:`over` would not make (a model file edited by hand, say)."""
        names = [n for n, *_ in self.ranges + self.values + self.levels] + list(self.every)
        sound = (isinstance(self.rule, str) and bool(self.rule.strip())
                 and all(isinstance(n, str) for n in names) and len(set(names)) == len(names) and names
                 and all(len(r) == 3 and _number(r[1]) and _number(r[2]) and r[1] <= r[2] for r in self.ranges)
                 and all(len(v) == 2 and _number(v[1]) for v in self.values)
                 and all(len(lv) == 2 and isinstance(lv[1], tuple) and lv[1]
                         and all(isinstance(x, str) for x in lv[1]) for lv in self.levels))
        if not sound:
            raise DataError(f"A rule over a box needs a rule text and one range, value or levels per feature; "
                            f"got rule={self.rule!r}, ranges={self.ranges!r}, values={self.values!r}, "
                            f"levels={self.levels!r}, every={self.every!r}. Build it with lo.rule.over(...).")

    @property
    def box(self) -> str:
        """The box in words: ``0 <= distance_km <= 50, stops = 2, every region``."""
        parts = [f"{lo:g} <= {written(n)} <= {hi:g}" for n, lo, hi in self.ranges]
        parts += [f"{written(n)} = {v:g}" for n, v in self.values]
        parts += [f"{written(c)} = {lv[0]!r}" if len(lv) == 1 else
                  f"{written(c)} in ({', '.join(map(repr, lv))})" for c, lv in self.levels]
        parts += [f"every {written(c)}" for c in self.every]
        return ", ".join(parts)

    @property
    def text(self) -> str:
        return f"{self.rule} over {self.box}"

    def compile(self, ctx: Context) -> list[Requirement]:
        self._check_text()
        inputs = _inputs(ctx, self.text)
        choices = self._choices(inputs)
        count = math.prod(len(c) for c in choices.values())
        if count > LIMIT:
            ranged = sum(len(c) == 2 and isinstance(c[0], float) for c in choices.values())
            raise ParameterError(f"Rule {self.text!r}: the box has {count} corners (2^{ranged} for the ranged "
                                 f"features{', times the levels' if count > 2 ** ranged else ''}), more than the "
                                 f"limit {LIMIT}; give fewer features a range (a single value instead) or fewer "
                                 f"levels.")
        design = _corners(ctx, inputs, choices)
        box_ctx = Context(ctx.names, design, None, ctx.reference, ctx.former,
                          no_rows="the box takes the place of the data rows")
        corners = math.prod(len(c) for n, c in choices.items() if inputs[n] is None)
        levelled = [f"{len(choices[n])} levels of {written(n)}" for n in inputs
                    if inputs[n] is not None and len(choices[n]) > 1]
        note = (f"required at the {corners} corner{'s' * (corners > 1)} of the box"
                + (f" for each of the {' x '.join(levelled)}" if levelled else "")
                + ": exact for a linear model, whose prediction is lowest and highest at corners")
        return [replace(r, text=f"{r.text} over {self.box}", note=note) for r in parse(self.rule, box_ctx)]

    def _check_text(self) -> None:
        tree, quoted = read(self.rule)
        nodes = list(ast.walk(tree.body))
        if any(isinstance(n, ast.IfExp) for n in nodes):
            raise DataError(f"Rule {self.text!r}: a rule over a box has no 'where'; the box takes its place. "
                            f"Give the level or the narrower range in the box instead (e.g. region='north').")
        mixing = sorted({n.func.id for n in nodes if isinstance(n, ast.Call) and isinstance(n.func, ast.Name)
                         and n.func.id in MIXING})
        if mixing:
            raise DataError(f"Rule {self.text!r}: {', '.join(f + '(...)' for f in mixing)} would mix the corners "
                            f"of the box; a rule over a box holds at each point of it, e.g. \"prediction >= 0\".")
        if not any(isinstance(n, ast.Name) and quoted.names.get(n.id, n.id) == "prediction" for n in nodes):
            raise DataError(f"Rule {self.text!r}: the rule names no prediction, so a box changes nothing; "
                            f"require it as plain text, e.g. task.require({self.rule!r}).")

    def _choices(self, inputs: dict[str, tuple[str, ...] | None]) -> dict[str, tuple]:
        """For every input (feature or encoded column), the values the corners take."""
        given: dict[str, tuple] = {}
        for name, low, high in self.ranges:
            given[name] = (float(low),) if low == high else (float(low), float(high))
        for name, value in self.values:
            given[name] = (float(value),)
        for name, levels in self.levels:
            given[name] = tuple(levels)
        for name in self.every:
            given[name] = (EVERY,)
        problems = []
        for name in given:
            if name not in inputs:
                problems.append(f"{written(name)} is not a feature of the model"
                                f"{nearest(name, list(inputs), show=written)}")
        missing = [n for n in inputs if n not in given]
        if missing:
            names = ", ".join(map(written, missing[:-1])) + (" and " if len(missing) > 1 else "") + written(missing[-1])
            problems.append(f"{names} {'has' if len(missing) == 1 else 'have'} no range; give "
                            f"{'it' if len(missing) == 1 else 'each'} a (low, high) pair or one value"
                            + (" (an encoded column: a level, a list of levels or 'every')"
                               if any(inputs[n] is not None for n in missing) else ""))
        out = {}
        for name, known in inputs.items():
            if name not in given:
                continue
            values = given[name]
            numeric = isinstance(values[0], float)
            if known is None and not numeric:
                problems.append(f"{written(name)} is a number feature; give it a (low, high) pair or one value, "
                                f"not {'the word every' if values == (EVERY,) else 'levels'}")
            elif known is not None and numeric:
                problems.append(f"{written(name)} is an encoded column; give it a level, a list of levels or "
                                f"'every' (its levels: {', '.join(map(repr, known))})")
            elif known is not None and values == (EVERY,):
                if EVERY in known:
                    problems.append(f"{written(name)} has a level called {EVERY!r}, so 'every' would be "
                                    f"ambiguous; list the levels instead")
                out[name] = known
            elif known is not None:
                unknown = [v for v in values if v not in known]
                if unknown:
                    problems.append(f"{written(name)} has no level {', '.join(map(repr, unknown))}; its levels: "
                                    f"{', '.join(map(repr, known))}")
                out[name] = values
            else:
                out[name] = values
        if problems:
            raise DataError(f"Rule {self.text!r}: " + problems[0] if len(problems) == 1 else
                            f"Rule {self.text!r}: {len(problems)} parts of the box have to change", problems=problems)
        return {name: out[name] for name in inputs}


def _inputs(ctx: Context, text: str) -> dict[str, tuple[str, ...] | None]:
    """The model's inputs: number features (None) and encoded columns (their levels, reference first)."""
    enc = getattr(ctx, "encoding", None)
    if enc is None:
        if ctx.design is None:
            raise DataError(f"Rule {text!r}: a rule over a box is about the predictions of a regression or "
                            f"classification task; this task has none.")
        return {n: None for n in ctx.names if n != "intercept"}
    out: dict[str, tuple[str, ...] | None] = {}
    for column in enc.columns:
        if column in enc.levels:
            ref = (enc.reference[column],) if column in enc.reference else ()
            out[str(column)] = tuple(map(str, ref + tuple(enc.levels[column])))
        else:
            out[str(column)] = None
    return out


def _corners(ctx: Context, inputs, choices) -> np.ndarray:
    """One design row (with the column of ones, when the task has an intercept) per corner."""
    d = sum(1 if known is None else len(known) - (1 if _has_reference(ctx, name) else 0)
            for name, known in inputs.items())
    grid = np.array(list(itertools.product(*[range(len(c)) for c in choices.values()])), dtype=int)
    X = np.zeros((len(grid), ctx.p))
    col = 0
    for j, (name, known) in enumerate(inputs.items()):
        picked = np.asarray(choices[name], dtype=object)[grid[:, j]]
        if known is None:
            X[:, col] = picked.astype(float)
            col += 1
            continue
        kept = known[1:] if _has_reference(ctx, name) else known
        for level in kept:
            X[:, col] = picked == level
            col += 1
    if ctx.p == d + 1:
        X[:, d] = 1.0
    return X


def _has_reference(ctx: Context, column: str) -> bool:
    enc = getattr(ctx, "encoding", None)
    return enc is not None and column in enc.reference


def over(rule: str, /, **box) -> Over:
    """A rule on predictions required at every point of a box of feature values.

    Parameters
    ----------
    rule : rule text on predictions, e.g. ``"prediction >= 0"`` or ``"0 <= prediction <= 100"``.
    **box : one entry per feature of the model: ``(low, high)``, or one value; an encoded column
        one level (``region="north"``), a list of levels, or ``"every"``. Names that are not
        identifiers: ``over("prediction >= 0", **{"unit price": (0, 5)})``.

    Compiled exactly through the box's corners (see :mod:`learnopt.rules.domain`).

    >>> import learnopt as lo
    >>> lo.rule.over("prediction <= 100", size=(1, 9), floors=2).text
    'prediction <= 100 over 1 <= size <= 9, floors = 2'
    """
    if not isinstance(rule, str) or not rule.strip():
        raise ParameterError(f"over({rule!r}): the rule has to be text on predictions, e.g. \"prediction >= 0\"")
    if not box:
        raise ParameterError(f"over({rule!r}): give the box, one range or value per feature, e.g. "
                             f"over({rule!r}, distance_km=(0, 50), region='every')")
    ranges, values, levels, every, problems = [], [], [], [], []
    for name, given in box.items():
        if isinstance(given, str):
            (every.append(name) if given == EVERY else levels.append((name, (given,))))
        elif _number(given):
            values.append((name, float(given)))
        elif isinstance(given, (list, tuple)) and given and all(isinstance(v, str) for v in given):
            if len(set(given)) < len(given):
                problems.append(complaint("over", name, given, "a list of different levels"))
            levels.append((name, tuple(given)))
        elif isinstance(given, (list, tuple)) and len(given) == 2 and all(_number(v) for v in given):
            low, high = (float(v) for v in given)
            if low > high:
                problems.append(complaint("over", name, given, f"a pair (low, high) with low at most high; "
                                                               f"swap them: ({given[1]!r}, {given[0]!r})"))
            ranges.append((name, low, high))
        else:
            problems.append(complaint("over", name, given, "a pair (low, high) of finite numbers, one finite "
                                                           "number, a level, a list of levels, or 'every'"))
    if problems:
        raise ParameterError(problems[0] if len(problems) == 1 else f"over({rule!r}): {len(problems)} parts of "
                             f"the box have to change", problems=problems)
    return Over(rule.strip(), tuple(ranges), tuple(values), tuple(levels), tuple(every))


def _number(value) -> bool:
    return isinstance(value, Real) and math.isfinite(value)
