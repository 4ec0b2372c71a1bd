"""The base class of the losses: the facts a loss declares and the maths it provides.

A loss is a function ``f`` of one number per row, the *argument* ``z``: ``"residual"`` losses
use ``z = prediction - target``, ``"margin"`` losses ``z = label * prediction`` (labels -1/+1),
``"linear"`` losses the linear predictor ``z = x'w + b + offset`` together with each row's
target (the log-link deviances of :mod:`learnopt.terms.count_losses`). :meth:`Loss.given`
binds the targets, so every caller sees a function of z alone per row.
The table of the built-in losses and their registry are in :mod:`learnopt.terms.losses`.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import cvxpy as cp
import numpy as np


@dataclass(frozen=True)
class Loss:
    """Base class: subclasses declare facts as class data and implement the maths."""

    name: ClassVar[str] = "loss"
    argument: ClassVar[str] = "residual"  # or "margin", "linear"
    link: ClassVar[str | None] = None       # "log": predictions are exp(linear predictor)
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

    def given(self, y: np.ndarray) -> "Loss":
        """The loss with each row's target bound (losses of z alone: the loss itself)."""
        return self

    def check_target(self, y: np.ndarray, target: str) -> None:
        """Refuse targets the loss cannot fit (DataError); every number is fine by default."""

    def _outside(self, u: np.ndarray, tol: float = 1e-12) -> np.ndarray:
        low, high = self.dual_domain()
        return (u < low - tol) | (u > high + tol)
