"""Separable penalties: l1 (lasso), l2 (ridge) and the elastic net between them, one class.

strength * sum_j c_j (mix |w_j| + (1 - mix) w_j^2), with c the per-coefficient factors. Being a
sum over coefficients, their conjugate and the shrink factor of a dual point are closed forms,
which the certificate and the newton route use directly.
"""
from __future__ import annotations

from dataclasses import dataclass
from numbers import Real

import cvxpy as cp
import numpy as np

from learnopt.core import checks as params
from learnopt.terms.arguments import old_field_names
from learnopt.terms.penalty_base import Penalty, factor_array


@old_field_names(lam="strength", weights="factors")
@dataclass(frozen=True)
class Separable(Penalty):
    """strength * sum_j c_j (mix |w_j| + (1 - mix) w_j^2): l1 (mix=1), l2 (mix=0), elastic net."""

    strength: float = 1.0
    mix: float = 1.0
    factors: tuple | None = None

    def __post_init__(self):
        params.check(self.describe_name(), strength=(self.strength, params.NONNEGATIVE), mix=(self.mix, params.UNIT))

    def describe_name(self) -> str:
        if isinstance(self.mix, Real) and not isinstance(self.mix, bool) and self.mix in (0.0, 1.0):
            return "l1" if self.mix == 1.0 else "l2"
        return "elastic_net"

    @property
    def cone(self):  # type: ignore[override]
        return "linear" if self.mix == 1.0 else "quadratic"

    def describe(self):
        name = self.describe_name()
        return f"{name}(strength={self.strength:g}" + (f", mix={self.mix:g})" if name == "elastic_net" else ")")

    def separable(self, names):
        c = factor_array(self.factors, names, self.describe_name())
        return self.strength * self.mix * c, self.strength * (1.0 - self.mix) * c

    def expr(self, w, names):
        a, c = self.separable(names)
        out = 0
        if np.any(a):
            out = out + cp.norm1(cp.multiply(a, w))
        if np.any(c):
            out = out + cp.sum_squares(cp.multiply(np.sqrt(c), w))
        return out

    def value(self, w, names):
        a, c = self.separable(names)
        return float(a @ np.abs(w) + c @ w ** 2)

    def conjugate(self, g, names):
        a, c = self.separable(names)
        return separable_conjugate(g, a, c)

    def shrink(self, g, names):
        a, c = self.separable(names)
        return separable_shrink(g, a, c)

    def conjugate_expr(self, v, names):
        a, c = self.separable(names)
        quad, lin = np.flatnonzero(c > 0), np.flatnonzero(c == 0)
        expr = cp.sum(cp.square(cp.pos(cp.abs(v[quad]) - a[quad])) / (4.0 * c[quad])) if quad.size else 0.0
        cons = [cp.abs(v[lin]) <= a[lin]] if lin.size else []
        return expr, cons


def separable_conjugate(g: np.ndarray, a: np.ndarray, c: np.ndarray) -> float:
    """Conjugate of sum_j a_j|w_j| + c_j w_j^2 at g: sum (|g|-a)_+^2 / (4c); +inf where c=0 and |g|>a."""
    excess = np.maximum(np.abs(g) - a, 0.0)
    quad = c > 0
    if np.any(excess[~quad] > 0):
        return np.inf
    return float(np.sum(excess[quad] ** 2 / (4.0 * c[quad])))


def separable_shrink(g: np.ndarray, a: np.ndarray, c: np.ndarray) -> float:
    lin = (c == 0) & (np.abs(g) > a)
    if not np.any(lin):
        return 1.0
    return float(np.min(a[lin] / np.abs(g[lin])))
