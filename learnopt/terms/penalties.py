"""Penalties on the coefficients w (never on the intercept): one small frozen object each.

=====================================  ==================================================
penalty                                value
=====================================  ==================================================
l1(lam)                                lam * sum_j c_j |w_j|
l2(lam)                                lam * sum_j c_j w_j^2            (no 1/2)
elastic_net(lam, mix)                  lam * sum_j c_j (mix |w_j| + (1 - mix) w_j^2)
group(lam, groups)                     lam * sum_g c_g sqrt(|g|) ||w_g||_2
total_variation(lam, names)            lam * sum_k c_k |w_{k+1} - w_k| over the named order
custom(fn, name=...)                   fn(w), any DCP-convex cvxpy expression
=====================================  ==================================================

``c`` are the optional per-feature (per-group, per-step) weights, default 1; a weight of 0
leaves that coefficient unpenalised. Every penalty can report the directions along which it
is constant (its null space) and, for the certificate, its convex conjugate R*(g).
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, ClassVar, Mapping, Sequence

import cvxpy as cp
import numpy as np

from learnopt.core import checks as params
from learnopt.core.errors import DataError, ParameterError

__all__ = ["Penalty", "l1", "l2", "elastic_net", "group", "total_variation", "custom"]

Weights = Mapping[str, float] | Sequence[float] | None


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

    def with_strength(self, lam: float) -> "Penalty":
        """The same penalty with another strength (used by paths and cross-validation)."""
        from dataclasses import replace
        return replace(self, lam=lam)


def _indicator_conjugate(pen: Penalty, g: np.ndarray, names) -> float:
    """Conjugate of a seminorm penalty: 0 inside its dual ball (and off its flat directions), else +inf."""
    N = pen.null_space(names)
    flat_ok = not N.shape[1] or np.abs(N.T @ g).max() <= 1e-12 * (1.0 + np.abs(g).max())
    return 0.0 if flat_ok and pen.shrink(g, names) >= 1.0 - 1e-12 else np.inf


def _weights(weights: Weights, names: Sequence[str], owner: str) -> np.ndarray:
    """Per-feature weights as an array aligned with names (missing names weigh 1)."""
    d = len(names)
    if weights is None:
        return np.ones(d)
    if isinstance(weights, Mapping):
        unknown = [k for k in weights if k not in names]
        if unknown:
            raise DataError(f"{owner}: weights name unknown coefficients {unknown}; "
                            f"coefficients are {list(names)}.")
        out = np.ones(d)
        for k, v in weights.items():
            out[list(names).index(k)] = float(v)
    else:
        out = np.asarray(weights, dtype=float).ravel()
        if out.size != d:
            raise DataError(f"{owner}: {out.size} weights given for {d} coefficients; give one "
                            f"per coefficient or a mapping name -> weight.")
    if not np.all(np.isfinite(out)) or np.any(out < 0):
        raise ParameterError(f"The 'weights' parameter of {owner} must be finite and >= 0. Got {weights!r} instead.")
    return out


def _freeze(weights: Weights):
    if weights is None:
        return None
    if isinstance(weights, Mapping):
        return tuple(sorted((str(k), float(v)) for k, v in weights.items()))
    return tuple(float(v) for v in np.asarray(weights, dtype=float).ravel())


def _thaw(weights):
    if weights and isinstance(weights[0], tuple):
        return dict(weights)
    return weights


@dataclass(frozen=True)
class Separable(Penalty):
    """lam * sum_j c_j (mix |w_j| + (1 - mix) w_j^2): l1 (mix=1), l2 (mix=0), elastic net."""

    lam: float = 1.0
    mix: float = 1.0
    weights: tuple | None = None

    def __post_init__(self):
        params.check(self.describe_name(), lam=(self.lam, params.NONNEGATIVE), mix=(self.mix, params.UNIT))

    def describe_name(self) -> str:
        return {1.0: "l1", 0.0: "l2"}.get(float(self.mix), "elastic_net")

    @property
    def cone(self):  # type: ignore[override]
        return "linear" if self.mix == 1.0 else "quadratic"

    def describe(self):
        kind = self.describe_name()
        return f"{kind}(lam={self.lam:g}" + (f", mix={self.mix:g})" if kind == "elastic_net" else ")")

    def separable(self, names):
        c = _weights(_thaw(self.weights), names, self.describe_name())
        return self.lam * self.mix * c, self.lam * (1.0 - self.mix) * c

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


@dataclass(frozen=True)
class Group(Penalty):
    """lam * sum_g c_g sqrt(|g|) ||w_g||_2 (group lasso). Conjugate: indicator of ||g_G|| <= lam c_G sqrt|G|."""

    lam: float = 1.0
    groups: tuple[tuple[str, ...], ...] = ()
    weights: tuple | None = None
    name: ClassVar[str] = "group"
    cone: ClassVar[str] = "second_order"

    def __post_init__(self):
        params.check("group", lam=(self.lam, params.NONNEGATIVE))

    def describe(self):
        return f"group(lam={self.lam:g}, {len(self.groups)} groups)"

    def _index(self, names):
        pos = {n: i for i, n in enumerate(names)}
        missing = [n for g in self.groups for n in g if n not in pos]
        if missing:
            raise DataError(f"group: unknown coefficient names {missing}; coefficients are {list(names)}.")
        c = np.ones(len(self.groups)) if self.weights is None else np.asarray(self.weights, float)
        if c.size != len(self.groups) or np.any(c < 0) or not np.all(np.isfinite(c)):
            raise ParameterError(f"The 'weights' parameter of group must be one finite value >= 0 per group. "
                                 f"Got {self.weights!r} instead.")
        return [np.array([pos[n] for n in g]) for g in self.groups], c

    def expr(self, w, names):
        idx, c = self._index(names)
        return sum(self.lam * c[k] * np.sqrt(len(g)) * cp.norm2(w[g]) for k, g in enumerate(idx))

    def value(self, w, names):
        idx, c = self._index(names)
        return float(sum(self.lam * c[k] * np.sqrt(len(g)) * np.linalg.norm(w[g]) for k, g in enumerate(idx)))

    def null_space(self, names):
        idx, c = self._index(names)
        covered = np.zeros(len(names), bool)
        for k, g in enumerate(idx):
            if c[k] > 0 and self.lam > 0:
                covered[g] = True
        return np.eye(len(names))[:, ~covered]

    def conjugate(self, g, names):
        return _indicator_conjugate(self, g, names)

    def conjugate_expr(self, v, names):
        idx, c = self._index(names)
        covered = np.zeros(len(names), bool)
        cons = []
        for k, g in enumerate(idx):
            cons.append(cp.norm2(v[g]) <= self.lam * c[k] * np.sqrt(len(g)))
            covered[g] = True
        if (~covered).any():
            cons.append(v[np.flatnonzero(~covered)] == 0)
        return 0.0, cons

    def shrink(self, g, names):
        idx, c = self._index(names)
        s = 1.0
        for k, grp in enumerate(idx):
            norm = np.linalg.norm(g[grp])
            cap = self.lam * c[k] * np.sqrt(len(grp))
            if norm > cap:
                s = min(s, cap / norm)
        return s


@dataclass(frozen=True)
class TotalVariation(Penalty):
    """lam * sum_k c_k |w_{k+1} - w_k| over the named order (fused lasso on a chain).

    Conjugate: 0 when g = D^T v with |v_k| <= lam c_k (v_k = -cumulative sum of g along the
    chain, and the chain sum of g is zero), +inf otherwise.
    """

    lam: float = 1.0
    order: tuple[str, ...] = ()
    weights: tuple | None = None
    name: ClassVar[str] = "total_variation"

    def __post_init__(self):
        params.check("total_variation", lam=(self.lam, params.NONNEGATIVE))
        if len(self.order) < 2:
            raise ParameterError("The 'names' parameter of total_variation must list at least two "
                                 f"coefficient names in order. Got {list(self.order)!r} instead.")

    def describe(self):
        return f"total_variation(lam={self.lam:g}, {len(self.order)} names)"

    def _index(self, names):
        pos = {n: i for i, n in enumerate(names)}
        missing = [n for n in self.order if n not in pos]
        if missing:
            raise DataError(f"total_variation: unknown coefficient names {missing}; coefficients are {list(names)}.")
        c = np.ones(len(self.order) - 1) if self.weights is None else np.asarray(self.weights, float)
        if c.size != len(self.order) - 1 or np.any(c < 0):
            raise ParameterError("The 'weights' parameter of total_variation must give one value >= 0 per "
                                 f"step ({len(self.order) - 1}). Got {self.weights!r} instead.")
        return np.array([pos[n] for n in self.order]), c

    def expr(self, w, names):
        idx, c = self._index(names)
        return self.lam * cp.norm1(cp.multiply(c, cp.diff(w[idx])))

    def value(self, w, names):
        idx, c = self._index(names)
        return float(self.lam * np.sum(c * np.abs(np.diff(w[idx]))))

    def null_space(self, names):
        idx, c = self._index(names)
        d = len(names)
        basis = [np.eye(d)[:, j] for j in range(d) if j not in set(idx)]
        # the chain splits into pieces at steps with zero weight; each piece may shift freely
        start = 0
        for k in range(len(idx)):
            if k == len(idx) - 1 or c[k] == 0 or self.lam == 0:
                v = np.zeros(d)
                v[idx[start:k + 1]] = 1.0
                basis.append(v / np.linalg.norm(v))
                start = k + 1
        return np.column_stack(basis) if basis else np.zeros((d, 0))

    def _duals(self, g, names):
        idx, c = self._index(names)
        v = -np.cumsum(g[idx])[:-1]
        return v, self.lam * c

    def conjugate(self, g, names):
        return _indicator_conjugate(self, g, names)

    def conjugate_expr(self, v, names):
        idx, c = self._index(names)
        m = len(idx)
        D = np.diff(np.eye(m), axis=0)                       # (m-1) x m, (D w)_k = w_{k+1} - w_k
        mu = cp.Variable(m - 1)
        cons = [v[idx] == D.T @ mu, cp.abs(mu) <= self.lam * c]
        rest = np.setdiff1d(np.arange(len(names)), idx)
        if rest.size:
            cons.append(v[rest] == 0)
        return 0.0, cons

    def shrink(self, g, names):
        v, cap = self._duals(g, names)
        over = np.abs(v) > cap
        return 1.0 if not np.any(over) else float(np.min(cap[over] / np.abs(v[over])))


@dataclass(frozen=True)
class CustomPenalty(Penalty):
    """A user penalty ``fn(w)`` built from cvxpy atoms; accepted only when DCP-convex."""

    fn: Callable = None
    label: str = "custom"
    name: ClassVar[str] = "custom"

    @property
    def cone(self):  # type: ignore[override]
        from learnopt.terms.convexity import cone_of
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


# ----------------------------------------------------------------------------- constructors

def l1(lam: float, *, weights: Weights = None) -> Penalty:
    """Lasso penalty lam * sum_j c_j |w_j| (c = per-feature weights, default 1)."""
    return Separable(lam, 1.0, _freeze(weights))


def l2(lam: float, *, weights: Weights = None) -> Penalty:
    """Ridge penalty lam * sum_j c_j w_j^2 (no 1/2)."""
    return Separable(lam, 0.0, _freeze(weights))


def elastic_net(lam: float, mix: float = 0.5, *, weights: Weights = None) -> Penalty:
    """Elastic net lam * sum_j c_j (mix |w_j| + (1 - mix) w_j^2), 0 <= mix <= 1."""
    return Separable(lam, mix, _freeze(weights))


def group(lam: float, groups: Mapping[str, Sequence[str]] | Sequence[Sequence[str]], *,
          weights: Sequence[float] | None = None) -> Penalty:
    """Group lasso lam * sum_g c_g sqrt(|g|) ||w_g||_2; groups by name lists (or a mapping label -> names)."""
    seq = list(groups.values()) if isinstance(groups, Mapping) else list(groups)
    if not seq or any(isinstance(g, str) or len(g) == 0 for g in seq):
        raise ParameterError("The 'groups' parameter of group must be a list of non-empty lists of "
                             f"coefficient names. Got {groups!r} instead.")
    return Group(lam, tuple(tuple(str(n) for n in g) for g in seq), _freeze(weights))


def total_variation(lam: float, names: Sequence[str], *, weights: Sequence[float] | None = None) -> Penalty:
    """Total variation lam * sum_k c_k |w_{k+1} - w_k| over ``names`` in the given order."""
    if isinstance(names, str):
        raise ParameterError("The 'names' parameter of total_variation must be a list of coefficient "
                             f"names. Got the single string {names!r} instead.")
    return TotalVariation(lam, tuple(str(n) for n in names), _freeze(weights))


def custom(fn: Callable, *, name: str = "custom") -> Penalty:
    """A penalty ``fn(w) -> cvxpy expression`` on the coefficient vector (task feature order).

    Accepted only when cvxpy can prove it convex; the certificate treats it through a small
    exact solve, so a fit with a custom penalty is certified like any other.
    """
    if not callable(fn):
        raise ParameterError(f"The 'fn' parameter of custom penalty {name!r} must be callable. Got {fn!r} instead.")
    return CustomPenalty(fn=fn, label=name)
