"""The rules of a shaped effect (:mod:`learnopt.data.shaping` builds the basis): linear rules on
the basis coefficients, compiled like any other rule, so prices, standing and the certificate
treat them alike.

``lines`` form, coefficients (slope, turn1 .. turnm); the slope on piece s is
slope + turn1 + ... + turns (s = 0 .. m):

* increasing: every piece's slope >= 0 (m + 1 rows); with convex only the first piece's, with
  concave only the last piece's (the others follow);
* decreasing: every piece's slope <= 0; with convex only the last piece's, with concave only
  the first piece's;
* convex: every turn >= 0;  concave: every turn <= 0.

``steps`` form, coefficients (step1 .. stepm): increasing: every step >= 0; decreasing: every
step <= 0 (convex and concave do not apply to steps).

Increasing with decreasing (a constant: no effect) and convex with concave (a straight line:
the plain feature) are refused, each with the fix.
"""
from __future__ import annotations

import re
from dataclasses import dataclass

import numpy as np

from learnopt.core.checks import nearest
from learnopt.core.errors import ParameterError
from learnopt.rules.requirements import Context, Requirement, RuleSpec

WORDS = ("increasing", "decreasing", "convex", "concave")
OPPOSITE = {"increasing": "decreasing", "convex": "concave"}


def read_words(feature: str, shape, form: str) -> tuple[str, ...]:
    """The shape words of ``shape`` (text such as "increasing concave" or "increasing and
    concave", or a list of words), checked; in the order of :data:`WORDS`."""
    text = " ".join(shape) if isinstance(shape, (list, tuple)) else shape
    if not isinstance(text, str):
        raise ParameterError(f"shape({feature!r}, {shape!r}): the shape has to be text such as \"increasing\" or "
                             f"\"increasing concave\" (words: {', '.join(WORDS)})", parameters=("shape",))
    words = [w for w in re.split(r"[\s,]+", text.strip().lower()) if w and w != "and"]
    unknown = [w for w in words if w not in WORDS]
    if unknown or not words:
        bad = unknown[0] if unknown else text
        raise ParameterError(f"shape({feature!r}, {shape!r}): {bad!r} is not a shape word{nearest(bad, WORDS)}; "
                             f"use one or two of {', '.join(WORDS)}, e.g. \"increasing concave\"",
                             parameters=("shape",))
    for a, b in OPPOSITE.items():
        if a in words and b in words:
            fix = (f"a feature both {a} and {b} has no effect; leave {feature!r} out of the features, or keep one word"
                   if a == "increasing" else
                   f"a feature both {a} and {b} is a straight line; leave {feature!r} unshaped (a plain feature), "
                   f"or keep one word")
            raise ParameterError(f"shape({feature!r}, {shape!r}): {fix}", parameters=("shape",))
    if form == "steps" and {"convex", "concave"} & set(words):
        raise ParameterError(f"shape({feature!r}, {shape!r}, form='steps'): steps can be increasing or decreasing "
                             f"only; for a convex or concave effect use form=\"lines\"", parameters=("shape",))
    return tuple(w for w in WORDS if w in words)


@dataclass(frozen=True)
class Shape(RuleSpec):
    """The shape rules of one feature; ``names`` are its basis coefficients in order."""

    feature: str
    words: tuple[str, ...]
    form: str
    names: tuple[str, ...]

    @property
    def text(self) -> str:
        return f"{self.feature} is {' and '.join(self.words)}"

    def compile(self, ctx: Context) -> list[Requirement]:
        at = [ctx.names.index(n) for n in self.names]
        k = len(at)

        def rows(M: np.ndarray) -> np.ndarray:
            A = np.zeros((M.shape[0], ctx.p))
            A[:, at] = M
            return A

        out = []
        f = self.feature
        if self.form == "steps":
            for w in self.words:
                sign = -1.0 if w == "increasing" else 1.0
                out.append(Requirement(f"{f} {w}: every step {'>=' if sign < 0 else '<='} 0", "<=",
                                       rows(sign * np.eye(k)), np.zeros(k)))
            return out
        slopes = np.tril(np.ones((k, k)))            # slope of piece s = slope + turn1 + ... + turns
        turns = np.eye(k)[1:]
        convex, concave = "convex" in self.words, "concave" in self.words
        for w in self.words:
            if w in ("increasing", "decreasing"):
                sign = -1.0 if w == "increasing" else 1.0
                first = (convex and w == "increasing") or (concave and w == "decreasing")
                last = (concave and w == "increasing") or (convex and w == "decreasing")
                pick = slopes[:1] if first else slopes[-1:] if last else slopes
                which = ("the first piece" if first else "the last piece" if last else f"each of its {k} pieces")
                out.append(Requirement(f"{f} {w}: slope {'>=' if sign < 0 else '<='} 0 on {which}", "<=",
                                       rows(sign * pick), np.zeros(pick.shape[0])))
            elif k > 1:
                sign = -1.0 if w == "convex" else 1.0
                out.append(Requirement(f"{f} {w}: slope change {'>=' if sign < 0 else '<='} 0 at each of its "
                                       f"{k - 1} knots", "<=", rows(sign * turns), np.zeros(k - 1)))
        return out
