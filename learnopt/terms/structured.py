"""Structured penalties: the group lasso and total variation along a named order.

Both are seminorms: their conjugate is the indicator of a dual ball (0 inside, +inf outside),
and the shrink factor scales a dual point back into that ball.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import cvxpy as cp
import numpy as np

from learnopt.core import checks as params
from learnopt.core.errors import DataError
from learnopt.terms.arguments import old_field_names
from learnopt.terms.penalty_base import Penalty, indicator_conjugate


@old_field_names(lam="strength", weights="factors")
@dataclass(frozen=True)
class Group(Penalty):
    """strength * sum_g c_g sqrt(|g|) ||w_g||_2 (group lasso); c = per-group factors.

    Conjugate: indicator of ||g_G|| <= strength c_G sqrt|G| for every group G.
    """

    strength: float = 1.0
    groups: tuple[tuple[str, ...], ...] = ()
    factors: tuple | None = None
    name: ClassVar[str] = "group"
    cone: ClassVar[str] = "second_order"

    def __post_init__(self):
        params.check("group", strength=(self.strength, params.NONNEGATIVE))

    def describe(self):
        return f"group(strength={self.strength:g}, {len(self.groups)} groups)"

    def _index(self, names):
        pos = {n: i for i, n in enumerate(names)}
        missing = [n for g in self.groups for n in g if n not in pos]
        if missing:
            raise DataError(f"group: unknown coefficient names {missing}; coefficients are {list(names)}.")
        c = np.ones(len(self.groups)) if self.factors is None else np.asarray(self.factors, float)
        return [np.array([pos[n] for n in g]) for g in self.groups], c

    def expr(self, w, names):
        idx, c = self._index(names)
        return sum(self.strength * c[k] * np.sqrt(len(g)) * cp.norm2(w[g]) for k, g in enumerate(idx))

    def value(self, w, names):
        idx, c = self._index(names)
        return float(sum(self.strength * c[k] * np.sqrt(len(g)) * np.linalg.norm(w[g]) for k, g in enumerate(idx)))

    def null_space(self, names):
        idx, c = self._index(names)
        covered = np.zeros(len(names), bool)
        for k, g in enumerate(idx):
            if c[k] > 0 and self.strength > 0:
                covered[g] = True
        return np.eye(len(names))[:, ~covered]

    def conjugate(self, g, names):
        return indicator_conjugate(self, g, names)

    def conjugate_expr(self, v, names):
        idx, c = self._index(names)
        covered = np.zeros(len(names), bool)
        cons = []
        for k, g in enumerate(idx):
            cons.append(cp.norm2(v[g]) <= self.strength * c[k] * np.sqrt(len(g)))
            covered[g] = True
        if (~covered).any():
            cons.append(v[np.flatnonzero(~covered)] == 0)
        return 0.0, cons

    def shrink(self, g, names):
        idx, c = self._index(names)
        s = 1.0
        for k, grp in enumerate(idx):
            norm = np.linalg.norm(g[grp])
            cap = self.strength * c[k] * np.sqrt(len(grp))
            if norm > cap:
                s = min(s, cap / norm)
        return s


@old_field_names(lam="strength", weights="factors")
@dataclass(frozen=True)
class TotalVariation(Penalty):
    """strength * sum_k c_k |w_{k+1} - w_k| over the named order (fused lasso on a chain);
    c = per-step factors.

    Conjugate: 0 when g = D^T v with |v_k| <= strength c_k (v_k = -cumulative sum of g along the
    chain, and the chain sum of g is zero), +inf otherwise.
    """

    strength: float = 1.0
    order: tuple[str, ...] = ()
    factors: tuple | None = None
    name: ClassVar[str] = "total_variation"

    def __post_init__(self):
        params.check("total_variation", strength=(self.strength, params.NONNEGATIVE))
        if len(self.order) < 2:
            raise params.refusal("total_variation", "names", list(self.order),
                                 "a list of at least two coefficient names, in order")

    def describe(self):
        return f"total_variation(strength={self.strength:g}, {len(self.order)} names)"

    def _index(self, names):
        pos = {n: i for i, n in enumerate(names)}
        missing = [n for n in self.order if n not in pos]
        if missing:
            raise DataError(f"total_variation: unknown coefficient names {missing}; coefficients are {list(names)}.")
        c = np.ones(len(self.order) - 1) if self.factors is None else np.asarray(self.factors, float)
        return np.array([pos[n] for n in self.order]), c

    def expr(self, w, names):
        idx, c = self._index(names)
        return self.strength * cp.norm1(cp.multiply(c, cp.diff(w[idx])))

    def value(self, w, names):
        idx, c = self._index(names)
        return float(self.strength * np.sum(c * np.abs(np.diff(w[idx]))))

    def null_space(self, names):
        idx, c = self._index(names)
        d = len(names)
        basis = [np.eye(d)[:, j] for j in range(d) if j not in set(idx)]
        # the chain splits into pieces at steps with a zero factor; each piece may shift freely
        start = 0
        for k in range(len(idx)):
            if k == len(idx) - 1 or c[k] == 0 or self.strength == 0:
                v = np.zeros(d)
                v[idx[start:k + 1]] = 1.0
                basis.append(v / np.linalg.norm(v))
                start = k + 1
        return np.column_stack(basis) if basis else np.zeros((d, 0))

    def _duals(self, g, names):
        idx, c = self._index(names)
        v = -np.cumsum(g[idx])[:-1]
        return v, self.strength * c

    def conjugate(self, g, names):
        return indicator_conjugate(self, g, names)

    def conjugate_expr(self, v, names):
        idx, c = self._index(names)
        m = len(idx)
        D = np.diff(np.eye(m), axis=0)                       # (m-1) x m, (D w)_k = w_{k+1} - w_k
        mu = cp.Variable(m - 1)
        cons = [v[idx] == D.T @ mu, cp.abs(mu) <= self.strength * c]
        rest = np.setdiff1d(np.arange(len(names)), idx)
        if rest.size:
            cons.append(v[rest] == 0)
        return 0.0, cons

    def shrink(self, g, names):
        v, cap = self._duals(g, names)
        # a step with factor 0 caps its dual at 0, which a point projected off the flat directions
        # meets only up to rounding (the chain's pieces are not coordinate axes): allow rounding
        over = np.abs(v) > cap + 1e-12 * (1.0 + np.abs(g).max(initial=0.0))
        return 1.0 if not np.any(over) else float(np.min(cap[over] / np.abs(v[over])))
