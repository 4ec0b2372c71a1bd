"""Smooth losses (a continuous first derivative): squared, huber, squared hinge, logistic.

They need a quadratic or exponential cone and give the newton route its curvature.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import cvxpy as cp
import numpy as np
from scipy.special import expit, xlogy

from learnopt.core import checks as params
from learnopt.terms.loss_base import Loss


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


def squared() -> Loss:
    """Squared loss r^2, r = prediction - target."""
    return Squared()


def huber(delta: float = 1.0) -> Loss:
    """Huber loss with threshold ``delta`` > 0 (quadratic inside, linear outside)."""
    return Huber(delta)


def squared_hinge() -> Loss:
    """Squared hinge loss max(0, 1 - label*prediction)^2."""
    return SquaredHinge()


def logistic() -> Loss:
    """Logistic loss log(1 + exp(-label*prediction))."""
    return Logistic()
