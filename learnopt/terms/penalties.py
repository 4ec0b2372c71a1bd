"""Penalties on the coefficients w (never on the intercept): one small frozen object each.

=====================================  ==================================================
penalty                                value
=====================================  ==================================================
l1(strength)                           strength * sum_j c_j |w_j|
l2(strength)                           strength * sum_j c_j w_j^2            (no 1/2)
elastic_net(strength, mix)             strength * sum_j c_j (mix |w_j| + (1 - mix) w_j^2)
group(strength, groups)                strength * sum_g c_g sqrt(|g|) ||w_g||_2
total_variation(strength, names)       strength * sum_k c_k |w_{k+1} - w_k| over the named order
shared(strength, features)             strength * sum_j c_j sqrt(K) ||w_j over the K classes||_2 (several
                                       classes; with one coefficient per feature: strength * sum c_j |w_j|)
custom(fn, name=...)                   fn(w), any DCP-convex cvxpy expression
=====================================  ==================================================

``c`` are the optional per-coefficient (per-group, per-step) ``factors``, default 1; a factor of
0 leaves that coefficient unpenalised. Every penalty can report the directions along which it
is constant (its null space) and, for the certificate, its convex conjugate R*(g).

The classes live in :mod:`~learnopt.terms.separable`, :mod:`~learnopt.terms.structured` and
:mod:`~learnopt.terms.penalty_base`; this module is the one users see (``lo.penalty``) and holds
the registry :data:`PENALTIES`: one :class:`~learnopt.terms.registry.PenaltySpec` row per named
penalty, from which the recipe schema and the common tests are derived.

Renamed in this release (the old names still work, with a DeprecationWarning, and go in the
next one): the keyword and attribute ``lam`` is now ``strength``; the per-coefficient keyword
``weights`` is now ``factors`` (``weights`` is the task's word for row weights).
"""
from __future__ import annotations

from typing import Callable, Mapping, Sequence

from learnopt.core import checks as params
from learnopt.core.errors import DataError, ParameterError
from learnopt.terms.arguments import renamed
from learnopt.terms.penalty_base import (CustomPenalty, Factors, Penalty, freeze_counted, freeze_factors,
                                         name_list, name_lists)
from learnopt.terms.registry import EXAMPLE_NAMES, PenaltySpec
from learnopt.terms.separable import Separable, separable_conjugate, separable_shrink
from learnopt.terms.structured import Group, TotalVariation
from learnopt.terms.across import Shared, shared

__all__ = ["Penalty", "l1", "l2", "elastic_net", "group", "total_variation", "shared", "custom", "PENALTIES",
           "PenaltySpec",
           # the classes (model files name them; isinstance checks use them) and their helpers
           "Separable", "Group", "TotalVariation", "Shared", "CustomPenalty", "separable_conjugate", "separable_shrink",
           "Factors", "Weights", "DataError", "ParameterError"]

Weights = Factors   # the old name of the type


@renamed(lam="strength", weights="factors")
def l1(strength: float, *, factors: Factors = None) -> Penalty:
    """Lasso penalty strength * sum_j c_j |w_j| (c = per-coefficient factors, default 1)."""
    return Separable(strength, 1.0, freeze_factors(factors, "l1"))


@renamed(lam="strength", weights="factors")
def l2(strength: float, *, factors: Factors = None) -> Penalty:
    """Ridge penalty strength * sum_j c_j w_j^2 (no 1/2)."""
    return Separable(strength, 0.0, freeze_factors(factors, "l2"))


@renamed(lam="strength", weights="factors")
def elastic_net(strength: float, mix: float = 0.5, *, factors: Factors = None) -> Penalty:
    """Elastic net strength * sum_j c_j (mix |w_j| + (1 - mix) w_j^2), 0 <= mix <= 1."""
    return Separable(strength, mix, freeze_factors(factors, "elastic_net"))


@renamed(lam="strength", weights="factors")
def group(strength: float, groups: Mapping[str, Sequence[str]] | Sequence[Sequence[str]], *,
          factors: Sequence[float] | None = None) -> Penalty:
    """Group lasso strength * sum_g c_g sqrt(|g|) ||w_g||_2; groups by name lists (or a mapping
    label -> names); ``factors``: one per group."""
    listed = name_lists(groups, "group", "groups",
                        "a list of non-empty lists of coefficient names (or a mapping label -> names)")
    return Group(strength, listed, freeze_counted(factors, "group", len(listed), "group"))


@renamed(lam="strength", weights="factors")
def total_variation(strength: float, names: Sequence[str], *, factors: Sequence[float] | None = None) -> Penalty:
    """Total variation strength * sum_k c_k |w_{k+1} - w_k| over ``names`` in the given order;
    ``factors``: one per step (one fewer than the names)."""
    order = name_list(names, "total_variation", "names", "a list of at least two coefficient names, in order",
                      least=2)
    return TotalVariation(strength, order, freeze_counted(factors, "total_variation", len(order) - 1, "step"))


def custom(fn: Callable, *, name: str = "custom") -> Penalty:
    """A penalty ``fn(w) -> cvxpy expression`` on the coefficient vector (task feature order).

    Accepted only when cvxpy can prove it convex; the certificate treats it through a small
    exact solve, so a fit with a custom penalty is certified like any other.
    """
    if not callable(fn):
        raise params.refusal("custom", "fn", fn, "callable: a function of the coefficient vector w "
                                                "returning a cvxpy expression")
    return CustomPenalty(fn=fn, label=name)


# the registry: one row per named penalty (custom penalties are objects, not names); the
# examples name coefficients from EXAMPLE_NAMES
_A, _B, _C, _D = EXAMPLE_NAMES
PENALTIES: dict[str, PenaltySpec] = {s.name: s for s in (
    PenaltySpec("l1", l1, (l1(0.3), l1(0.3, factors={_A: 0.0, _B: 2.0}))),
    PenaltySpec("l2", l2, (l2(0.2), l2(0.2, factors=[1.0, 0.0, 3.0, 0.5]))),
    PenaltySpec("elastic_net", elastic_net, (elastic_net(0.4, 0.3),)),
    PenaltySpec("group", group, (group(0.5, [[_A, _B], [_C]]), group(0.5, {"g": [_B, _C, _D]}, factors=[2.0]))),
    PenaltySpec("total_variation", total_variation, (total_variation(0.6, [_A, _B, _C, _D]),
                                                     total_variation(0.6, [_D, _A, _B], factors=[1.0, 0.0]))),
    PenaltySpec("shared", shared, (shared(0.4), shared(0.4, [_A, _C], factors={_C: 2.0}))),
)}
