"""Rule objects a user can hand to ``require``: text (:class:`TextRule`), box bounds on
coefficients (:func:`bounds`), and :func:`compile_all`, which compiles a list of them and
reports every problem at once. Region rules (polygon, ball, segment) are in
:mod:`learnopt.rules.regions`.
"""
from __future__ import annotations

import math
from dataclasses import dataclass, replace
from numbers import Real
from typing import Sequence


from learnopt.core import checks as params
from learnopt.core.errors import DataError, NotConvexError
from learnopt.rules.language import parse
from learnopt.rules.reading import written
from learnopt.rules.requirements import Context, Requirement, RuleSpec


@dataclass(frozen=True)
class TextRule(RuleSpec):
    """A rule written as text."""

    text: str

    def compile(self, ctx: Context) -> list[Requirement]:
        return parse(self.text, ctx)


@dataclass(frozen=True)
class Bounds(RuleSpec):
    """Box bounds on named coefficients: ``bounds(a=(0, None), b=(-1, 1))``."""

    limits: tuple[tuple[str, float | None, float | None], ...]

    @property
    def text(self) -> str:
        return "; ".join(self._texts())

    def _texts(self) -> list[str]:
        out = []
        for name, low, high in self.limits:
            shown = written(name)
            if low is not None and high is not None:
                out.append(f"{low:g} <= {shown} <= {high:g}")
            elif low is not None:
                out.append(f"{shown} >= {low:g}")
            elif high is not None:
                out.append(f"{shown} <= {high:g}")
        return out

    def compile(self, ctx: Context) -> list[Requirement]:
        reqs: list[Requirement] = []
        for t in self._texts():
            reqs.extend(parse(t, ctx))
        return reqs


def bounds(**limits: tuple[float | None, float | None]) -> Bounds:
    """Box bounds on coefficients by name, e.g. ``lo.rule.bounds(price=(None, 0), size=(0, 5))``.

    Each value is ``(low, high)``; ``None`` leaves that side open.
    """
    items, problems = [], []
    for name, pair in limits.items():
        try:
            low, high = pair
        except (TypeError, ValueError):
            problems.append(params.complaint("bounds", name, pair, "a pair (low, high); use None for an open side"))
            continue
        if not (_limit(low) and _limit(high)):
            problems.append(params.complaint("bounds", name, pair, "a pair of finite numbers or None "
                                                                   "(None leaves that side open)"))
        elif low is not None and high is not None and low > high:
            problems.append(params.complaint("bounds", name, pair, f"a pair (low, high) with low at most high; "
                                                                   f"swap them: ({high!r}, {low!r})"))
        else:
            items.append((name, None if low is None else float(low), None if high is None else float(high)))
    if problems:
        raise DataError(problems[0] if len(problems) == 1 else f"bounds: {len(problems)} limits have to change",
                        problems=problems)
    return Bounds(tuple(items))


def _limit(value) -> bool:
    return value is None or (isinstance(value, Real) and not isinstance(value, bool) and math.isfinite(value))


def as_spec(rule: str | RuleSpec) -> RuleSpec:
    if isinstance(rule, RuleSpec):
        return rule
    if isinstance(rule, str):
        return TextRule(rule.strip())
    raise DataError(f"A rule must be text such as \"a >= 0\" or a rule object from lo.rule; "
                    f"got {type(rule).__name__} {rule!r}.")


def compile_all(specs: Sequence[RuleSpec], ctx: Context) -> list[Requirement]:
    """Compile every rule; collect every problem and raise them together."""
    reqs, problems, not_convex = [], [], []
    for spec in specs:
        try:
            reqs.extend(replace(r, rule=spec.text) for r in spec.compile(ctx))
        except NotConvexError as exc:
            not_convex.append(str(exc))
        except DataError as exc:
            problems.append(str(exc))
    if not_convex:
        raise NotConvexError(not_convex[0] if len(not_convex) == 1 else "Some rules are not convex",
                             problems=not_convex + problems)
    if problems:
        raise DataError(problems[0] if len(problems) == 1 else "Some rules cannot be used",
                        problems=problems)
    return reqs
