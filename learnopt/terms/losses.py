"""Losses: one small frozen object each.

A loss is a function ``f`` of one number per row, the *argument* ``z``:

* ``"residual"`` losses use ``z = r = prediction - target``;
* ``"margin"`` losses (classification, labels mapped to -1/+1) use ``z = m = label * prediction``.

The task's objective is the weighted mean ``sum_i a_i f(z_i)`` with ``a_i = w_i / sum(w)``.
Every loss declares its curvature facts (convex, smooth, the cone class it needs) and
provides its cvxpy expression, its numpy value, its (sub)gradient, and its convex conjugate
``f*(u) = sup_z (u z - f(z))`` with the interval where ``f*`` is finite; the certificate
(:mod:`learnopt.solve.certificate`) is built from those alone.

The classes live in :mod:`~learnopt.terms.smooth_losses`, :mod:`~learnopt.terms.linear_losses`
and :mod:`~learnopt.terms.special_losses`; this module is the one users see (``lo.loss``) and
holds the registry :data:`LOSSES`: one :class:`~learnopt.terms.registry.LossSpec` row per named
loss, from which the task kinds, the recipe schema and the common tests are derived.

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
poisson                y log(y/mu) - y + mu, mu = exp(eta)                (u+y)log(u+y) - (u+y) - c(y), u >= -y
gamma                  y/mu - 1 - log(y/mu)                               (1-u)(log(1-u) - log y - 1) - c(y), u <= 1
tweedie(power)         half Tweedie deviance, 1 < power < 2               per row by a 1-D root (see count_losses)
=====================  =================================================  ===============

The last three are functions of the linear predictor eta = x'w + b + offset and each row's
target (argument ``"linear"``; :mod:`~learnopt.terms.count_losses` gives the scaling: half
unit deviances, so the objective equals scikit-learn's (1/(2n)) sum of deviances).
"""
from __future__ import annotations


from learnopt.core import checks as params
from learnopt.core.errors import NotConvexError, ParameterError
from learnopt.terms.cones import CLASSES as CONES
from learnopt.terms.count_losses import Gamma, LogLink, Poisson, Tweedie, gamma, poisson, tweedie
from learnopt.terms.linear_losses import (Absolute, EpsilonInsensitive, Hinge, Quantile, absolute,
                                          epsilon_insensitive, hinge, quantile)
from learnopt.terms.loss_base import Loss
from learnopt.terms.registry import KINDS, LossSpec
from learnopt.terms.smooth_losses import (Huber, Logistic, Squared, SquaredHinge, huber, logistic, squared,
                                          squared_hinge)
from learnopt.terms.special_losses import Custom, ZeroOne, custom, zero_one
from learnopt.core.checks import nearest

__all__ = [
    "Loss", "squared", "absolute", "huber", "quantile", "epsilon_insensitive", "hinge",
    "squared_hinge", "logistic", "poisson", "gamma", "tweedie", "zero_one", "custom", "by_name", "for_kind",
    "LOSSES", "LossSpec", "KINDS", "CONES",
    # the classes (model files name them; isinstance checks use them)
    "Squared", "Absolute", "Huber", "Quantile", "EpsilonInsensitive", "Hinge", "SquaredHinge", "Logistic",
    "Poisson", "Gamma", "Tweedie", "LogLink", "ZeroOne", "Custom", "NotConvexError", "ParameterError",
]

REGRESSION, CLASSIFICATION = ("regression",), ("classification",)

# the registry: one row per named loss (custom losses are objects, not names)
LOSSES: dict[str, LossSpec] = {s.name: s for s in (
    LossSpec("squared", squared, (squared(),), kinds=KINDS),
    LossSpec("absolute", absolute, (absolute(),), kinds=REGRESSION),
    LossSpec("huber", huber, (huber(0.7),), kinds=REGRESSION),
    LossSpec("quantile", quantile, (quantile(0.2),), kinds=REGRESSION, aliases=("median",)),
    LossSpec("epsilon_insensitive", epsilon_insensitive, (epsilon_insensitive(0.3),), kinds=REGRESSION),
    LossSpec("hinge", hinge, (hinge(),), kinds=CLASSIFICATION),
    LossSpec("squared_hinge", squared_hinge, (squared_hinge(),), kinds=CLASSIFICATION),
    LossSpec("logistic", logistic, (logistic(),), kinds=CLASSIFICATION),
    LossSpec("poisson", poisson, (poisson(),), kinds=REGRESSION),
    LossSpec("gamma", gamma, (gamma(),), kinds=REGRESSION),
    LossSpec("tweedie", tweedie, (tweedie(1.3),), kinds=REGRESSION),
    LossSpec("zero_one", zero_one, (zero_one(),), kinds=CLASSIFICATION),
)}
_ALIASES = {alias: spec for spec in LOSSES.values() for alias in spec.aliases}


def for_kind(kind: str) -> tuple[str, ...]:
    """Names of the registered losses a task of this kind can be fitted with, in registry order.

    The 0-1 loss is registered (so that ``by_name`` knows it and fitting with it is refused with
    the reason) but is not listed: no task is fitted with it.
    """
    params.check("for_kind", kind=(kind, params.OneOf(KINDS)))
    return tuple(name for name, spec in LOSSES.items() if kind in spec.kinds and spec.convex)


def by_name(loss: Loss | str) -> Loss:
    """Turn a loss name (parameter-free losses, defaults otherwise) into a loss object."""
    if isinstance(loss, Loss):
        return loss
    if isinstance(loss, str) and (loss in LOSSES or loss in _ALIASES):
        return (LOSSES.get(loss) or _ALIASES[loss]).factory()
    known = sorted([*LOSSES, *_ALIASES])
    hint = nearest(loss, known)
    raise ParameterError(
        f"Unknown loss {loss!r}.{hint} Known losses: {', '.join(known)}; "
        f"losses with parameters are objects, e.g. lo.loss.quantile(0.9)."
    )
