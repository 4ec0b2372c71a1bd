"""Losses that are not built-in convex pieces: the 0-1 loss (registered so that fitting with it
is refused with a clear reason) and custom losses written with cvxpy atoms (accepted only when
cvxpy proves them convex).
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, ClassVar

import cvxpy as cp
import numpy as np

from learnopt.core import checks as params
from learnopt.core.errors import NotConvexError
from learnopt.terms.convexity import cone_of
from learnopt.terms.loss_base import Loss


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
    argument_of: str = "residual"      # what the loss is a function of: "residual" or "margin"
    conjugate_fn: Callable | None = None
    domain: tuple[float, float] = (-np.inf, np.inf)
    name: ClassVar[str] = "custom"

    @property
    def argument(self):  # type: ignore[override]
        return self.argument_of

    @property
    def cone(self):  # type: ignore[override]
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
    params.check("custom", fn=(fn, params.Condition("callable: a function of one row's residual or margin "
                                                    "returning a cvxpy expression", callable)),
                 argument=(argument, params.OneOf(("residual", "margin"))))
    return Custom(fn=fn, label=name, argument_of=argument, conjugate_fn=conjugate, domain=tuple(domain))
