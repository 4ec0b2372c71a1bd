"""The base class of the penalties, their per-coefficient factors, and custom penalties.

The table of the built-in penalties and their registry are in :mod:`learnopt.terms.penalties`.
A penalty's ``strength`` multiplies all of it; its optional ``factors`` (one per coefficient,
group or step, default 1) multiply it coefficient by coefficient, and a factor of 0 leaves that
coefficient unpenalised.
"""
from __future__ import annotations

import math
import warnings
from dataclasses import dataclass, replace
from numbers import Real
from typing import Callable, ClassVar, Mapping, Sequence

import cvxpy as cp
import numpy as np

from learnopt.core import checks as params
from learnopt.core.errors import DataError
from learnopt.terms.convexity import cone_of

Factors = Mapping[str, float] | Sequence[float] | None


@dataclass(frozen=True)
class Penalty:
    """Base class. ``names`` below is the task's tuple of coefficient names (no intercept)."""

    name: ClassVar[str] = "penalty"
    cone: ClassVar[str] = "linear"

    def expr(self, w: cp.Expression, names: tuple[str, ...]) -> cp.Expression:
        raise NotImplementedError

    def value(self, w: np.ndarray, names: tuple[str, ...]) -> float:
        raise NotImplementedError

    def separable(self, names) -> tuple[np.ndarray, np.ndarray] | None:
        """Per-coordinate (a, c) when the penalty equals sum_j a_j|w_j| + c_j w_j^2, else None."""
        return None

    def null_space(self, names) -> np.ndarray:
        """Orthonormal basis (d x r) of directions along which the penalty is constant."""
        a, c = self.separable(names)
        free = (a == 0) & (c == 0)
        return np.eye(len(names))[:, free]

    def conjugate(self, g: np.ndarray, names) -> float:
        """R*(g) = sup_w g.w - R(w) (may be +inf)."""
        raise NotImplementedError

    def shrink(self, g: np.ndarray, names) -> float:
        """Largest s in (0, 1] with R*(s g) finite (1 when R* is finite everywhere)."""
        return 1.0

    def conjugate_expr(self, v: cp.Variable, names) -> tuple[cp.Expression, list] | None:
        """R*(v) as a cvxpy expression plus the constraints that define dom R* (None if unknown)."""
        return None

    def describe(self) -> str:
        return self.name

    def with_strength(self, strength: float) -> "Penalty":
        """The same penalty with another strength (used by paths and cross-validation)."""
        return replace(self, strength=strength)

    @property
    def lam(self) -> float:
        """Old name of ``strength``; reading it still works in this release, with a DeprecationWarning."""
        warnings.warn("penalty.lam is now called penalty.strength; 'lam' is still readable in this "
                      "release and will be removed in the next one.", DeprecationWarning, stacklevel=2)
        return self.strength

    @property
    def weights(self):
        """Old name of ``factors``; reading it still works in this release, with a DeprecationWarning."""
        warnings.warn("penalty.weights is now called penalty.factors (per-coefficient factors, not row "
                      "weights); 'weights' is still readable in this release and will be removed in the "
                      "next one.", DeprecationWarning, stacklevel=2)
        return self.factors


def indicator_conjugate(pen: Penalty, g: np.ndarray, names) -> float:
    """Conjugate of a seminorm penalty: 0 inside its dual ball (and off its flat directions), else +inf."""
    N = pen.null_space(names)
    flat_ok = not N.shape[1] or np.abs(N.T @ g).max() <= 1e-12 * (1.0 + np.abs(g).max())
    return 0.0 if flat_ok and pen.shrink(g, names) >= 1.0 - 1e-12 else np.inf


def _factor(value) -> bool:
    return isinstance(value, Real) and not isinstance(value, bool) and math.isfinite(value) and value >= 0


def freeze_factors(factors: Factors, owner: str):
    """Factors as hashable data: a mapping name -> factor becomes sorted (name, factor) pairs (an
    empty one None: every factor 1), a sequence a tuple. Each factor must be a finite number >= 0
    (ParameterError otherwise)."""
    if factors is None:
        return None
    bad = params.refusal(owner, "factors", factors, "a mapping coefficient name -> factor, or a list of "
                                                    "factors, each a finite number at least 0")
    if isinstance(factors, Mapping):
        if not all(_factor(v) for v in factors.values()):
            raise bad
        return tuple(sorted((str(k), float(v)) for k, v in factors.items())) or None
    if isinstance(factors, (str, bytes)):
        raise bad
    try:
        values = list(factors)
    except TypeError:
        raise bad from None
    if not all(_factor(v) for v in values):
        raise bad
    return tuple(float(v) for v in values)


def freeze_counted(factors, owner: str, count: int, unit: str):
    """Factors given one per ``unit`` (group, step): a list of ``count`` finite numbers >= 0."""
    if factors is None:
        return None
    if isinstance(factors, Mapping) or len(frozen := freeze_factors(factors, owner)) != count:
        raise params.refusal(owner, "factors", factors, f"a list of {count} finite numbers at least 0, "
                                                        f"one per {unit}")
    return frozen


def factor_array(factors, names: Sequence[str], owner: str) -> np.ndarray:
    """Frozen per-coefficient factors as an array aligned with names (missing names get 1)."""
    d = len(names)
    if factors is None:
        return np.ones(d)
    if factors and isinstance(factors[0], tuple):
        given = dict(factors)
        unknown = [k for k in given if k not in names]
        if unknown:
            raise DataError(f"{owner}: factors name unknown coefficients {unknown}; "
                            f"coefficients are {list(names)}.")
        out = np.ones(d)
        for k, v in given.items():
            out[list(names).index(k)] = v
        return out
    out = np.asarray(factors, dtype=float)
    if out.size != d:
        raise DataError(f"{owner}: {out.size} factors given for {d} coefficients; give one per "
                        f"coefficient or a mapping name -> factor.")
    return out


def _items(value) -> list:
    """The items of a list-like value (not a string or mapping); [] when it is not one."""
    if isinstance(value, (str, bytes, Mapping)):
        return []
    try:
        return list(value)
    except TypeError:
        return []


def _name(n) -> bool:
    return isinstance(n, (str, Real)) and not isinstance(n, bool)


def name_list(value, owner: str, parameter: str, what: str, least: int = 1) -> tuple[str, ...]:
    """A list of at least ``least`` coefficient names (strings or numbers), as a tuple of strings."""
    items = _items(value)
    if len(items) < least or not all(_name(n) for n in items):
        raise params.refusal(owner, parameter, value, what)
    return tuple(str(n) for n in items)


def name_lists(value, owner: str, parameter: str, what: str) -> tuple[tuple[str, ...], ...]:
    """A non-empty list of non-empty lists of coefficient names (or a mapping label -> list)."""
    lists = _items(value.values() if isinstance(value, Mapping) else value)
    if not lists or not all((items := _items(g)) and all(_name(n) for n in items) for g in lists):
        raise params.refusal(owner, parameter, value, what)
    return tuple(tuple(str(n) for n in g) for g in lists)


@dataclass(frozen=True)
class CustomPenalty(Penalty):
    """A user penalty ``fn(w)`` built from cvxpy atoms; accepted only when DCP-convex."""

    fn: Callable = None
    label: str = "custom"
    name: ClassVar[str] = "custom"

    @property
    def cone(self):  # type: ignore[override]
        return cone_of(self.fn(cp.Variable(4, name="w")))

    def describe(self):
        return self.label

    def expr(self, w, names):
        return self.fn(w)

    def value(self, w, names):
        var = cp.Variable(len(w), name="w")
        var.value = np.asarray(w, dtype=float)
        return float(self.fn(var).value)

    def null_space(self, names):
        return np.zeros((len(names), 0))
