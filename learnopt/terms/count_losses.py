"""Counts and amounts: the Poisson, Gamma and Tweedie deviances with a log link.

These losses are functions of the *linear predictor* ``eta = x'w + b + offset`` (argument
``"linear"``) and of each row's target ``y``; the mean is ``mu = exp(eta)``. Each loss is the
family's **half unit deviance** with its constants, so it is 0 where ``mu = y``, at least 0
everywhere, and the task's objective is the weighted mean half deviance::

    poisson       y log(y/mu) - y + mu                                         y >= 0
    gamma         y/mu - 1 - log(y/mu)                                         y > 0
    tweedie(p)    y^(2-p)/((1-p)(2-p)) - y mu^(1-p)/(1-p) + mu^(2-p)/(2-p)     y >= 0, 1 < p < 2

Up to the constants in y they are ``exp(eta) - y eta``, ``y exp(-eta) + eta`` and
``-y exp((1-p) eta)/(1-p) + exp((2-p) eta)/(2-p)``: sums of exponentials of affine functions,
so convex in the coefficients (exponential cone).

Scaling against other tools: with equal row weights the data term is (1/n) sum half deviance =
(1/(2n)) sum deviance, exactly the data term of scikit-learn's PoissonRegressor,
GammaRegressor and TweedieRegressor (whose penalty is alpha/2 ||w||^2, i.e. learnopt's
``l2(alpha/2)``); statsmodels' GLM maximises the likelihood, whose unpenalised optimum is the same.

The methods take the targets as a second argument; :meth:`LogLink.given` binds them and returns
a :class:`RowLoss`, a function of z alone per row that answers the protocol every route and the
certificate use (the dual domain then differs per row).

Conjugates f*(u) = sup_z (u z - f(z; y)), with c(y) the constant in f:

* poisson: (u+y) log(u+y) - (u+y) - c(y) on u >= -y;
* gamma: (1-u) (log(1-u) - log y - 1) - c(y) on u <= 1;
* tweedie: no closed form for y > 0 (every u allowed): the maximiser z solves
  f'(z) = u, found per row by a safeguarded Newton iteration (bisection when a step leaves the
  bracket) on t = z - log y, where f'(z) = y^(2-p) (e^((2-p)t) - e^((1-p)t)); for y = 0 it is
  (u log u - u)/(2-p) on u >= 0. Any z gives u z - f(z) <= f*(u), so the root's round-off
  only moves the bound by its square times the curvature.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import cvxpy as cp
import numpy as np
from scipy.special import xlogy

from learnopt.core import checks as params
from learnopt.core.errors import DataError
from learnopt.terms.loss_base import Loss

ROOT_STEPS = 200


@dataclass(frozen=True)
class LogLink(Loss):
    """Base of the log-link deviances: the facts they share and the binding to targets."""

    argument: ClassVar[str] = "linear"
    cone: ClassVar[str] = "exponential"
    smooth: ClassVar[bool] = True
    link: ClassVar[str] = "log"
    support: ClassVar[str] = "at least 0"     # what every target has to be, in words

    def outside_support(self, y: np.ndarray) -> np.ndarray:
        """Which targets the family cannot have."""
        return ~(y >= 0)

    def given(self, y) -> "RowLoss":
        return RowLoss(self, np.asarray(y, float))

    def check_target(self, y: np.ndarray, target: str) -> None:
        """Refuse targets outside the family's support, naming how many and the first rows."""
        bad = np.flatnonzero(self.outside_support(np.asarray(y, float)))
        if bad.size:
            rows = ", ".join(map(str, bad[:5])) + (", ..." if bad.size > 5 else "")
            raise DataError(f"The target {target} has {bad.size} value(s) the {self.describe()} loss cannot "
                            f"fit (rows {rows}): its targets have to be {self.support}. Drop or correct "
                            f"those rows, or pick a loss for such targets (e.g. squared).")

    def mean(self, eta: np.ndarray) -> np.ndarray:
        """The mean exp(eta) of a linear predictor."""
        return np.exp(eta)

    def dual_domain(self):        # per row only: see RowLoss.dual_domain
        raise NotImplementedError("bind the targets first: loss.given(y).dual_domain()")


@dataclass(frozen=True)
class Poisson(LogLink):
    """Poisson half deviance y log(y/mu) - y + mu, mu = exp(eta). Conjugate (u+y)log(u+y) - (u+y) - c."""

    name: ClassVar[str] = "poisson"

    def _constant(self, y):
        return xlogy(y, y) - y

    def expr(self, z, y):
        return cp.exp(z) - cp.multiply(y, z) + self._constant(y)

    def value(self, z, y):
        return np.exp(z) - y * z + self._constant(y)

    def gradient(self, z, y):
        return np.exp(z) - y

    def curvature(self, z, y):
        return np.exp(z)

    def conjugate(self, u, y):
        v = np.maximum(u + y, 0.0)
        val = xlogy(v, v) - v - self._constant(y)
        return np.where(u < -y - 1e-12, np.inf, val)

    def domain(self, y):
        return -y, np.full(np.shape(y), np.inf)


@dataclass(frozen=True)
class Gamma(LogLink):
    """Gamma half deviance y/mu - 1 - log(y/mu), mu = exp(eta). Conjugate (1-u)(log(1-u) - log y - 1) - c."""

    name: ClassVar[str] = "gamma"
    support: ClassVar[str] = "above 0"

    def outside_support(self, y):
        return ~(y > 0)

    def _constant(self, y):
        return -1.0 - np.log(y)

    def expr(self, z, y):
        return cp.exp(np.log(y) - z) + z + self._constant(y)

    def value(self, z, y):
        return np.exp(np.log(y) - z) + z + self._constant(y)

    def gradient(self, z, y):
        return 1.0 - np.exp(np.log(y) - z)

    def curvature(self, z, y):
        return np.exp(np.log(y) - z)

    def conjugate(self, u, y):
        v = np.maximum(1.0 - u, 0.0)
        val = xlogy(v, v) - v * (np.log(y) + 1.0) - self._constant(y)
        return np.where(u > 1.0 + 1e-12, np.inf, val)

    def domain(self, y):
        return np.full(np.shape(y), -np.inf), np.ones(np.shape(y))


@dataclass(frozen=True)
class Tweedie(LogLink):
    """Tweedie half deviance with power 1 < p < 2 (compound Poisson-Gamma), mu = exp(eta).

    f = y^(2-p)/((1-p)(2-p)) - y mu^(1-p)/(1-p) + mu^(2-p)/(2-p); conjugate by a 1-D root per row.
    """

    power: float = 1.5
    name: ClassVar[str] = "tweedie"

    def __post_init__(self):
        params.check("tweedie", power=(self.power, params.Interval(1.0, 2.0, closed_low=False, closed_high=False)))

    def describe(self):
        return f"tweedie(power={self.power:g})"

    def _constant(self, y):
        p = self.power
        return np.maximum(y, 0.0) ** (2 - p) / ((1 - p) * (2 - p))

    def expr(self, z, y):
        p = self.power
        return (cp.multiply(y / (p - 1), cp.exp((1 - p) * z)) + cp.exp((2 - p) * z) / (2 - p)
                + self._constant(y))

    def value(self, z, y):
        p = self.power
        return y * np.exp((1 - p) * z) / (p - 1) + np.exp((2 - p) * z) / (2 - p) + self._constant(y)

    def gradient(self, z, y):
        p = self.power
        return np.exp((2 - p) * z) - y * np.exp((1 - p) * z)

    def curvature(self, z, y):
        p = self.power
        return (2 - p) * np.exp((2 - p) * z) + (p - 1) * y * np.exp((1 - p) * z)

    def conjugate(self, u, y):
        p = self.power
        u, y = np.broadcast_arrays(np.asarray(u, float), np.asarray(y, float))
        out = np.empty(u.shape)
        zero = y <= 0
        uz = np.maximum(u[zero], 0.0)
        out[zero] = np.where(u[zero] < -1e-12, np.inf, (xlogy(uz, uz) - uz) / (2 - p))
        pos = ~zero
        yp, up = y[pos], u[pos]
        scale = yp ** (2 - p)
        t = tweedie_root(up / scale, p)
        f = scale * (np.exp((1 - p) * t) / (p - 1) + np.exp((2 - p) * t) / (2 - p) + 1.0 / ((1 - p) * (2 - p)))
        out[pos] = up * (np.log(yp) + t) - f
        return out

    def domain(self, y):
        return np.where(y > 0, -np.inf, 0.0), np.full(np.shape(y), np.inf)


def tweedie_root(v: np.ndarray, p: float) -> np.ndarray:
    """t with e^((2-p)t) - e^((1-p)t) = v, per entry: safeguarded Newton inside a bracket.

    For v > 0 the root lies in [0, log(1+v)/(2-p)], for v < 0 in [-log(1+|v|)/(p-1), 0]
    (the function is increasing, 0 at t = 0, and differs from e^((2-p)t) resp. -e^((1-p)t) by at
    most 1 on those sides). A Newton step that leaves the bracket is replaced by bisection.
    """
    v = np.asarray(v, float)
    lo = np.where(v < 0, -np.log1p(np.abs(v)) / (p - 1), 0.0)
    hi = np.where(v > 0, np.log1p(np.maximum(v, 0.0)) / (2 - p), 0.0)
    t = 0.5 * (lo + hi)
    for _ in range(ROOT_STEPS):
        a, b = np.exp((2 - p) * t), np.exp((1 - p) * t)
        # e^((2-p)t) - e^((1-p)t), written as e^((1-p)t) (e^t - 1) near 0 (no cancellation there)
        h = np.where(np.abs(t) < 1.0, b * np.expm1(np.clip(t, -1.0, 1.0)), a - b) - v
        lo = np.where(h < 0, t, lo)
        hi = np.where(h > 0, t, hi)
        step = h / ((2 - p) * a - (1 - p) * b)
        new = t - step
        new = np.where((new <= lo) | (new >= hi), 0.5 * (lo + hi), new)
        done = np.abs(new - t) <= 1e-15 * (1.0 + np.abs(t))
        t = new
        if np.all(done):
            break
    return t


@dataclass(frozen=True, eq=False)
class RowLoss:
    """A log-link loss with every row's target fixed: a function of z alone per row.

    It answers what routes and the certificate ask of a loss (value, gradient, curvature,
    conjugate, dual_domain, expr, mean_expr, kinks); the dual domain is per row.
    """

    loss: LogLink
    y: np.ndarray

    @property
    def name(self):
        return self.loss.name

    argument, cone, smooth, convex, link = "linear", "exponential", True, True, "log"

    def rows(self, index) -> "RowLoss":
        return RowLoss(self.loss, self.y[index])

    def describe(self):
        return self.loss.describe()

    def expr(self, z):
        return self.loss.expr(z, self.y)

    def mean_expr(self, z, a):
        return a @ self.loss.expr(z, self.y)

    def value(self, z):
        with np.errstate(over="ignore"):      # a line search's trial point far out: the value is inf
            return self.loss.value(z, self.y)

    def gradient(self, z):
        return self.loss.gradient(z, self.y)

    def curvature(self, z):
        return self.loss.curvature(z, self.y)

    def conjugate(self, u):
        with np.errstate(invalid="ignore", over="ignore"):     # u = +-inf: the value says so (inf or nan)
            return self.loss.conjugate(u, self.y)

    def dual_domain(self):
        return self.loss.domain(self.y)

    def kinks(self):
        return None

    def mean(self, eta):
        return self.loss.mean(eta)


def poisson() -> Loss:
    """Poisson half deviance with a log link (counts; targets >= 0)."""
    return Poisson()


def gamma() -> Loss:
    """Gamma half deviance with a log link (positive amounts; targets > 0)."""
    return Gamma()


def tweedie(power: float = 1.5) -> Loss:
    """Tweedie half deviance with a log link, 1 < ``power`` < 2 (amounts with exact zeros)."""
    return Tweedie(power)
