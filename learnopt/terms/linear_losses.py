"""Piecewise-linear losses: absolute, quantile, epsilon-insensitive, hinge.

Every LP solver takes them; each reports where its slope changes (``kinks``).
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import cvxpy as cp
import numpy as np

from learnopt.core import checks as params
from learnopt.terms.loss_base import Loss


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


def absolute() -> Loss:
    """Absolute loss |r| (median regression)."""
    return Absolute()


def quantile(tau: float = 0.5) -> Loss:
    """Quantile (pinball) loss for the ``tau`` quantile, 0 < tau < 1."""
    return Quantile(tau)


def epsilon_insensitive(eps: float = 0.1) -> Loss:
    """max(0, |r| - eps), eps >= 0 (support-vector regression loss)."""
    return EpsilonInsensitive(eps)


def hinge() -> Loss:
    """Hinge loss max(0, 1 - label*prediction)."""
    return Hinge()
