"""Parameter checks declared as data, with one message template.

A building block lists its constraints as ``{"delta": Interval(0, None, closed_low=False)}``
and calls :func:`check` once; every violation is reported in the same words.
"""
from __future__ import annotations

import math
from dataclasses import dataclass
from numbers import Real

from learnopt.core.errors import ParameterError


@dataclass(frozen=True)
class Interval:
    """A real interval; ``None`` means unbounded on that side."""

    low: float | None = None
    high: float | None = None
    closed_low: bool = True
    closed_high: bool = True

    def describe(self) -> str:
        parts = []
        if self.low is not None:
            parts.append(f"{'>=' if self.closed_low else '>'} {self.low:g}")
        if self.high is not None:
            parts.append(f"{'<=' if self.closed_high else '<'} {self.high:g}")
        return " and ".join(parts) if parts else "a finite number"

    def holds(self, value: float) -> bool:
        if not math.isfinite(value):
            return False
        if self.low is not None and (value < self.low or (not self.closed_low and value == self.low)):
            return False
        if self.high is not None and (value > self.high or (not self.closed_high and value == self.high)):
            return False
        return True


POSITIVE = Interval(0.0, None, closed_low=False)
NONNEGATIVE = Interval(0.0, None)
OPEN_UNIT = Interval(0.0, 1.0, closed_low=False, closed_high=False)
UNIT = Interval(0.0, 1.0)


def shown(value) -> str:
    """A value as the user would write it: numpy scalars and arrays as plain numbers and lists."""
    if hasattr(value, "tolist") and type(value).__module__ == "numpy":
        value = value.tolist()
    return repr(value)


def check(owner: str, **values_and_rules: tuple[object, Interval]) -> None:
    """Check each ``name=(value, interval)``; raise one ParameterError listing every failure.

    The message reads: "The 'delta' parameter of huber must be > 0. Got -1.0 instead."
    """
    problems = []
    for name, (value, rule) in values_and_rules.items():
        if isinstance(value, bool) or not isinstance(value, Real):
            problems.append(
                f"The '{name}' parameter of {owner} must be a number {rule.describe()}. "
                f"Got {shown(value)} instead."
            )
        elif not rule.holds(float(value)):
            problems.append(
                f"The '{name}' parameter of {owner} must be {rule.describe()}. Got {shown(value)} instead."
            )
    if problems:
        raise ParameterError(problems[0] if len(problems) == 1 else f"{owner}: invalid parameters",
                             problems=problems)
