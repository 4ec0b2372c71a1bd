"""Parameter checks declared as data, with one message template.

A building block lists its constraints as ``{"delta": Interval(0, None, closed_low=False)}``
and calls :func:`check` once; every violation is reported in the same words. Each line leads
with what the user wrote, then says what the value has to be:

    huber(delta=-1.0): delta has to be above 0

Checks written by hand (a callable, a list of names) use the same template through
:func:`complaint` and :func:`refusal`, so every parameter error reads alike.
"""
from __future__ import annotations

import difflib
import math
import shlex
from dataclasses import dataclass
from numbers import Real
from typing import Callable

from learnopt.core.errors import ParameterError

LONGEST = 72   # characters of a value shown in a message; longer values are cut with "..."


def _number(value: float) -> str:
    return f"{value:g}"


@dataclass(frozen=True)
class Interval:
    """A real interval; ``None`` means unbounded on that side."""

    low: float | None = None
    high: float | None = None
    closed_low: bool = True
    closed_high: bool = True

    def describe(self) -> str:
        """The interval in words: "above 0", "at least 1", "between 0 and 1", "at most 5"."""
        low, high = self.low, self.high
        if low is not None and high is not None:
            if not self.closed_low and not self.closed_high:
                return f"between {_number(low)} and {_number(high)}"
            if self.closed_low and self.closed_high:
                return f"between {_number(low)} and {_number(high)}, both included"
        parts = []
        if low is not None:
            parts.append(f"{'at least' if self.closed_low else 'above'} {_number(low)}")
        if high is not None:
            parts.append(f"{'at most' if self.closed_high else 'below'} {_number(high)}")
        return " and ".join(parts) if parts else "a finite number"

    def holds(self, value: float) -> bool:
        if not math.isfinite(value):
            return False
        if self.low is not None and (value < self.low or (not self.closed_low and value == self.low)):
            return False
        if self.high is not None and (value > self.high or (not self.closed_high and value == self.high)):
            return False
        return True

    def demand(self, value) -> str | None:
        """What ``value`` has to be instead (None when it is fine)."""
        bounded = self.low is not None or self.high is not None
        if isinstance(value, bool) or not isinstance(value, Real):
            return f"a number {self.describe()}" if bounded else "a number"
        if not math.isfinite(float(value)):
            return f"a finite number {self.describe()}" if bounded else "a finite number"
        return None if self.holds(float(value)) else self.describe()


@dataclass(frozen=True)
class OneOf:
    """A value taken from a fixed list of choices (compared by equality; True is not 1)."""

    options: tuple

    def describe(self) -> str:
        return "one of " + ", ".join(shown(o) for o in self.options)

    def demand(self, value) -> str | None:
        try:
            found = any(isinstance(value, bool) == isinstance(o, bool) and bool(value == o)
                        for o in self.options)
        except (TypeError, ValueError):   # an array compared with a choice
            found = False
        return None if found else self.describe()


@dataclass(frozen=True)
class Condition:
    """Any test on a value, with the words saying what passes (e.g. "callable")."""

    text: str
    test: Callable[[object], bool]

    def describe(self) -> str:
        return self.text

    def demand(self, value) -> str | None:
        return None if self.test(value) else self.text


POSITIVE = Interval(0.0, None, closed_low=False)
NONNEGATIVE = Interval(0.0, None)
OPEN_UNIT = Interval(0.0, 1.0, closed_low=False, closed_high=False)
UNIT = Interval(0.0, 1.0)


def shown(value) -> str:
    """A value as the user would write it: numpy scalars and arrays as plain numbers and lists."""
    if hasattr(value, "tolist") and type(value).__module__ == "numpy":
        value = value.tolist()
    return repr(value)


def _short(text: str) -> str:
    return text if len(text) <= LONGEST else text[: LONGEST - 3] + "..."


def wrote(owner: str, **values) -> str:
    """The call as the user wrote it, e.g. ``huber(delta=-1.0)``; a command-line option
    (a name starting with "-") is shown as typed: ``learnopt path --grid 1,x``."""
    if values and all(name.startswith("-") for name in values):
        return " ".join([owner] + [f"{name} {shlex.quote(str(v))}" for name, v in values.items()])
    return f"{owner}(" + ", ".join(f"{name}={_short(shown(v))}" for name, v in values.items()) + ")"


def complaint(owner: str, name: str, value, demand: str) -> str:
    """One line of the template: ``owner(name=value): name has to be <demand>``."""
    return f"{wrote(owner, **{name: value})}: {name} has to be {demand}"


def refusal(owner: str, name: str, value, demand: str) -> ParameterError:
    """A ParameterError about one parameter in the template's words (the caller raises it); it
    records the parameter and the demand like :func:`check` does."""
    return ParameterError(complaint(owner, name, value, demand), parameters=(name,), demands=(demand,))


def check(owner: str, **values_and_rules: tuple[object, Interval | OneOf | Condition]) -> None:
    """Check each ``name=(value, rule)``; raise one ParameterError listing every failure.

    The message reads ``huber(delta=-1.0): delta has to be above 0``; with several failures,
    one line per parameter under a heading that shows them all. ``error.parameters`` names the
    failed parameters and ``error.demands`` says, for each, what it has to be (in that order),
    so a recipe reader can point at its own keys.
    """
    failed = {}
    for name, (value, rule) in values_and_rules.items():
        demand = rule.demand(value)
        if demand is not None:
            failed[name] = (value, demand)
    if not failed:
        return
    lines = [complaint(owner, name, value, demand) for name, (value, demand) in failed.items()]
    head = lines[0] if len(lines) == 1 else \
        f"{wrote(owner, **{n: v for n, (v, _) in failed.items()})}: {len(lines)} parameters have to change"
    raise ParameterError(head, problems=lines, parameters=tuple(failed),
                         demands=tuple(d for _, d in failed.values()))


def nearest(word, known, *, n: int = 3, cutoff: float = 0.6, show=str) -> str:
    """The one form every "unknown name" message uses for its suggestion: ``" (nearest known:
    a, b)"``, or "" when nothing is close. ``show`` writes each suggestion (quoting, braces)."""
    close = difflib.get_close_matches(str(word), [str(k) for k in known], n=n, cutoff=cutoff)
    return f" (nearest known: {', '.join(show(c) for c in close)})" if close else ""
