"""Losses: one small frozen object each.

A loss is a function ``f`` of one number per row, the *argument* ``z``:

* ``"residual"`` losses use ``z = r = prediction - target``;
* ``"margin"`` losses (classification, labels mapped to -1/+1) use ``z = m = label * prediction``.

The task's objective is the weighted mean ``sum_i a_i f(z_i)`` with ``a_i = w_i / sum(w)``.
Every loss declares its curvature facts (convex, smooth, the cone class it needs) and
provides its cvxpy expression, its numpy value, its (sub)gradient, and its convex conjugate
``f*(u) = sup_z (u z - f(z))`` with the interval where ``f*`` is finite; the certificate
(:mod:`learnopt.certify`) is built from those alone.

Conventions (r = prediction - target):

=====================  =================================================  ===============
loss                   f                                                  conjugate f*(u)
=====================  =================================================  ===============
squared                r^2                                                u^2/4
absolute               |r|                                                0 on [-1, 1]
huber(delta)           r^2 if |r| <= delta else 2 delta |r| - delta^2      u^2/4 on [-2d, 2d]
quantile(tau)          max(tau u, (tau-1) u), u = target - prediction      0 on [-tau, 1-tau]
epsilon_insensitive    max(0, |r| - eps)                                  eps |u| on [-1, 1]
hinge                  max(0, 1 - m)                                      u on [-1, 0]
squared_hinge          max(0, 1 - m)^2                                    u + u^2/4 on (-inf, 0]
logistic               log(1 + exp(-m))                                   (-u)log(-u) + (1+u)log(1+u) on [-1, 0]
=====================  =================================================  ===============
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, ClassVar

import cvxpy as cp
import numpy as np
from scipy.special import expit, xlogy

from learnopt.core import checks as params
from learnopt.core.errors import NotConvexError, ParameterError

__all__ = [
    "Loss", "squared", "absolute", "huber", "quantile", "epsilon_insensitive", "hinge",
    "squared_hinge", "logistic", "zero_one", "custom", "by_name",
]

# cone classes, in increasing order of what a solver must support
CONES = ("linear", "quadratic", "second_order", "exponential")


@dataclass(frozen=True)
class Loss:
    """Base class: subclasses declare facts as class data and implement the maths."""

    name: ClassVar[str] = "loss"
    argument: ClassVar[str] = "residual"  # or "margin"
    cone: ClassVar[str] = "linear"
    smooth: ClassVar[bool] = False
    convex: ClassVar[bool] = True

    def expr(self, z: cp.Expression) -> cp.Expression:
        """Per-row cvxpy expression of f(z)."""
        raise NotImplementedError

    def value(self, z: np.ndarray) -> np.ndarray:
        """Per-row numpy value of f(z)."""
        raise NotImplementedError

    def gradient(self, z: np.ndarray) -> np.ndarray:
        """A (sub)gradient of f at z, per row."""
        raise NotImplementedError

    def curvature(self, z: np.ndarray) -> np.ndarray:
        """Second derivative f''(z) per row (a generalised one where f' has kinks); smooth losses only."""
        raise NotImplementedError

    def conjugate(self, u: np.ndarray) -> np.ndarray:
        """Per-row convex conjugate f*(u); +inf outside :meth:`dual_domain`."""
        raise NotImplementedError

    def dual_domain(self) -> tuple[float, float]:
        """Closed interval [low, high] where f* is finite (infinite ends allowed)."""
        return (-np.inf, np.inf)

    def kinks(self) -> tuple[float, ...] | None:
        """Where a piecewise-linear loss changes slope (None: not piecewise linear)."""
        return None

    def mean_expr(self, z: cp.Expression, a: np.ndarray) -> cp.Expression:
        """cvxpy expression of sum_i a_i f(z_i), a >= 0 summing to one."""
        return a @ self.expr(z)

    def describe(self) -> str:
        return self.name

    def _outside(self, u: np.ndarray, tol: float = 1e-12) -> np.ndarray:
        low, high = self.dual_domain()
        return (u < low - tol) | (u > high + tol)


@dataclass(frozen=True)
class Squared(Loss):
    """Squared loss r^2 (no 1/2). Conjugate u^2/4."""

    name: ClassVar[str] = "squared"
    cone: ClassVar[str] = "quadratic"
    smooth: ClassVar[bool] = True

    def expr(self, z):
        return cp.square(z)

    def mean_expr(self, z, a):
        return cp.sum_squares(cp.multiply(np.sqrt(a), z))

    def value(self, z):
        return z ** 2

    def gradient(self, z):
        return 2.0 * z

    def curvature(self, z):
        return np.full(np.shape(z), 2.0)

    def conjugate(self, u):
        return u ** 2 / 4.0


@dataclass(frozen=True)
class Absolute(Loss):
    """Absolute loss |r|. Conjugate: 0 on [-1, 1]."""

    name: ClassVar[str] = "absolute"

    def expr(self, z):
        return cp.abs(z)

    def value(self, z):
        return np.abs(z)

    def gradient(self, z):
        return np.sign(z)

    def conjugate(self, u):
        return np.where(self._outside(u), np.inf, 0.0)

    def kinks(self):
        return (0.0,)

    def dual_domain(self):
        return (-1.0, 1.0)


@dataclass(frozen=True)
class Huber(Loss):
    """Huber loss: r^2 if |r| <= delta else 2*delta*|r| - delta^2. Conjugate u^2/4 on [-2 delta, 2 delta]."""

    delta: float = 1.0
    name: ClassVar[str] = "huber"
    cone: ClassVar[str] = "quadratic"
    smooth: ClassVar[bool] = True

    def __post_init__(self):
        params.check("huber", delta=(self.delta, params.POSITIVE))

    def expr(self, z):
        return cp.huber(z, self.delta)

    def value(self, z):
        a = np.abs(z)
        return np.where(a <= self.delta, z ** 2, 2 * self.delta * a - self.delta ** 2)

    def gradient(self, z):
        return 2.0 * np.clip(z, -self.delta, self.delta)

    def curvature(self, z):
        return np.where(np.abs(z) <= self.delta, 2.0, 0.0)

    def conjugate(self, u):
        return np.where(self._outside(u), np.inf, u ** 2 / 4.0)

    def dual_domain(self):
        return (-2.0 * self.delta, 2.0 * self.delta)

    def describe(self):
        return f"huber(delta={self.delta:g})"


@dataclass(frozen=True)
class Quantile(Loss):
    """Quantile (pinball) loss max(tau*u, (tau-1)*u) with u = target - prediction = -r.

    Written as 0.5|r| + (0.5 - tau) r, which every LP solver accepts.
    Conjugate (in r): 0 on [-tau, 1 - tau].
    """

    tau: float = 0.5
    name: ClassVar[str] = "quantile"

    def __post_init__(self):
        params.check("quantile", tau=(self.tau, params.OPEN_UNIT))

    def expr(self, z):
        return 0.5 * cp.abs(z) + (0.5 - self.tau) * z

    def value(self, z):
        return np.maximum(-self.tau * z, (1.0 - self.tau) * z)

    def gradient(self, z):
        return np.where(z > 0, 1.0 - self.tau, np.where(z < 0, -self.tau, 0.5 - self.tau))

    def conjugate(self, u):
        return np.where(self._outside(u), np.inf, 0.0)

    def kinks(self):
        return (0.0,)

    def dual_domain(self):
        return (-self.tau, 1.0 - self.tau)

    def describe(self):
        return f"quantile(tau={self.tau:g})"


@dataclass(frozen=True)
class EpsilonInsensitive(Loss):
    """max(0, |r| - eps), written 0.5(|r - eps| + |r + eps|) - eps. Conjugate eps|u| on [-1, 1]."""

    eps: float = 0.1
    name: ClassVar[str] = "epsilon_insensitive"

    def __post_init__(self):
        params.check("epsilon_insensitive", eps=(self.eps, params.NONNEGATIVE))

    def expr(self, z):
        return 0.5 * (cp.abs(z - self.eps) + cp.abs(z + self.eps)) - self.eps

    def value(self, z):
        return np.maximum(0.0, np.abs(z) - self.eps)

    def gradient(self, z):
        return np.where(np.abs(z) > self.eps, np.sign(z), 0.0)

    def conjugate(self, u):
        return np.where(self._outside(u), np.inf, self.eps * np.abs(u))

    def kinks(self):
        return (-self.eps, self.eps) if self.eps > 0 else (0.0,)

    def dual_domain(self):
        return (-1.0, 1.0)

    def describe(self):
        return f"epsilon_insensitive(eps={self.eps:g})"


@dataclass(frozen=True)
class Hinge(Loss):
    """Hinge loss max(0, 1 - m), m = label*prediction. Conjugate u on [-1, 0]."""

    name: ClassVar[str] = "hinge"
    argument: ClassVar[str] = "margin"

    def expr(self, z):
        return 0.5 * (cp.abs(1 - z) + (1 - z))

    def value(self, z):
        return np.maximum(0.0, 1.0 - z)

    def gradient(self, z):
        return np.where(z < 1, -1.0, 0.0)

    def conjugate(self, u):
        return np.where(self._outside(u), np.inf, u)

    def kinks(self):
        return (1.0,)

    def dual_domain(self):
        return (-1.0, 0.0)


@dataclass(frozen=True)
class SquaredHinge(Loss):
    """Squared hinge max(0, 1 - m)^2. Conjugate u + u^2/4 on (-inf, 0]."""

    name: ClassVar[str] = "squared_hinge"
    argument: ClassVar[str] = "margin"
    cone: ClassVar[str] = "quadratic"
    smooth: ClassVar[bool] = True

    def expr(self, z):
        return cp.square(cp.pos(1 - z))

    def value(self, z):
        return np.maximum(0.0, 1.0 - z) ** 2

    def gradient(self, z):
        return -2.0 * np.maximum(0.0, 1.0 - z)

    def curvature(self, z):
        return np.where(z < 1.0, 2.0, 0.0)

    def conjugate(self, u):
        return np.where(self._outside(u), np.inf, u + u ** 2 / 4.0)

    def dual_domain(self):
        return (-np.inf, 0.0)


@dataclass(frozen=True)
class Logistic(Loss):
    """Logistic loss log(1 + exp(-m)). Conjugate (-u)log(-u) + (1+u)log(1+u) on [-1, 0]."""

    name: ClassVar[str] = "logistic"
    argument: ClassVar[str] = "margin"
    cone: ClassVar[str] = "exponential"
    smooth: ClassVar[bool] = True

    def expr(self, z):
        return cp.logistic(-z)

    def value(self, z):
        return np.logaddexp(0.0, -z)

    def gradient(self, z):
        return -expit(-z)

    def curvature(self, z):
        return expit(z) * expit(-z)

    def conjugate(self, u):
        inside = np.clip(u, -1.0, 0.0)
        val = xlogy(-inside, -inside) + xlogy(1.0 + inside, 1.0 + inside)
        return np.where(self._outside(u), np.inf, val)

    def dual_domain(self):
        return (-1.0, 0.0)


@dataclass(frozen=True)
class ZeroOne(Loss):
    """The 0-1 loss (1 when the sign of the prediction is wrong). Not convex: refused for fitting."""

    name: ClassVar[str] = "zero_one"
    argument: ClassVar[str] = "margin"
    convex: ClassVar[bool] = False

    def value(self, z):
        return (z <= 0).astype(float)

    def refusal(self) -> NotConvexError:
        return NotConvexError(
            "The 0-1 loss makes the task non-convex: it is a step function of the margin "
            "(flat, then a jump), so a straight line between two coefficient vectors can lie "
            "below it and the fit becomes a combinatorial search. Fit a convex surrogate "
            "instead: lo.loss.hinge(), lo.loss.logistic() or lo.loss.squared_hinge(); "
            "fit.evaluate() still reports the 0-1 error rate of the classifier."
        )


@dataclass(frozen=True)
class Custom(Loss):
    """A user loss built from cvxpy atoms; accepted only when DCP-convex.

    ``fn(z)`` must return a per-row cvxpy expression. ``conjugate`` (optional, numpy, per
    row) lets the certificate run; without it the fit cannot be certified optimal.
    """

    fn: Callable = None
    label: str = "custom"
    kind: str = "residual"
    conjugate_fn: Callable | None = None
    domain: tuple[float, float] = (-np.inf, np.inf)
    name: ClassVar[str] = "custom"

    @property
    def argument(self):  # type: ignore[override]
        return self.kind

    @property
    def cone(self):  # type: ignore[override]
        from learnopt.terms.convexity import cone_of
        return cone_of(self.fn(cp.Variable(3, name="z")))

    def expr(self, z):
        return self.fn(z)

    def value(self, z):
        var = cp.Variable(z.shape, name="z")
        var.value = np.asarray(z, dtype=float)
        return np.asarray(self.fn(var).value, dtype=float)

    def conjugate(self, u):
        if self.conjugate_fn is None:
            raise NotImplementedError
        return np.asarray(self.conjugate_fn(u), dtype=float)

    def dual_domain(self):
        return self.domain

    def describe(self):
        return self.label


# ----------------------------------------------------------------------------- constructors

def squared() -> Loss:
    """Squared loss r^2, r = prediction - target."""
    return Squared()


def absolute() -> Loss:
    """Absolute loss |r| (median regression)."""
    return Absolute()


def huber(delta: float = 1.0) -> Loss:
    """Huber loss with threshold ``delta`` > 0 (quadratic inside, linear outside)."""
    return Huber(delta)


def quantile(tau: float = 0.5) -> Loss:
    """Quantile (pinball) loss for the ``tau`` quantile, 0 < tau < 1."""
    return Quantile(tau)


def epsilon_insensitive(eps: float = 0.1) -> Loss:
    """max(0, |r| - eps), eps >= 0 (support-vector regression loss)."""
    return EpsilonInsensitive(eps)


def hinge() -> Loss:
    """Hinge loss max(0, 1 - label*prediction)."""
    return Hinge()


def squared_hinge() -> Loss:
    """Squared hinge loss max(0, 1 - label*prediction)^2."""
    return SquaredHinge()


def logistic() -> Loss:
    """Logistic loss log(1 + exp(-label*prediction))."""
    return Logistic()


def zero_one() -> Loss:
    """The 0-1 loss. Exists so that fitting with it fails with a clear NotConvexError."""
    return ZeroOne()


def custom(fn: Callable, *, name: str = "custom", argument: str = "residual",
           conjugate: Callable | None = None,
           domain: tuple[float, float] = (-np.inf, np.inf)) -> Loss:
    """A per-row loss built from cvxpy atoms, ``fn(z) -> expression``.

    Accepted only when cvxpy can prove it convex (checked when the task is built).
    Give ``conjugate`` (numpy, per row) and its ``domain`` to let the certificate run.
    """
    if not callable(fn):
        raise ParameterError(f"The 'fn' parameter of custom loss {name!r} must be callable. "
                             f"Got {fn!r} instead.")
    if argument not in ("residual", "margin"):
        raise ParameterError(f"The 'argument' parameter of custom loss {name!r} must be "
                             f"'residual' or 'margin'. Got {argument!r} instead.")
    return Custom(fn=fn, label=name, kind=argument, conjugate_fn=conjugate, domain=tuple(domain))


_BY_NAME = {
    "squared": squared, "absolute": absolute, "huber": huber, "quantile": quantile,
    "median": lambda: quantile(0.5), "epsilon_insensitive": epsilon_insensitive,
    "hinge": hinge, "squared_hinge": squared_hinge, "logistic": logistic, "zero_one": zero_one,
}


def by_name(loss: Loss | str) -> Loss:
    """Turn a loss name (parameter-free losses, defaults otherwise) into a loss object."""
    if isinstance(loss, Loss):
        return loss
    if isinstance(loss, str) and loss in _BY_NAME:
        return _BY_NAME[loss]()
    import difflib
    close = difflib.get_close_matches(str(loss), list(_BY_NAME), n=3)
    hint = f" Did you mean {', '.join(close)}?" if close else ""
    raise ParameterError(
        f"Unknown loss {loss!r}.{hint} Known losses: {', '.join(sorted(_BY_NAME))}; "
        f"losses with parameters are objects, e.g. lo.loss.quantile(0.9)."
    )
