"""Penalties when a feature has one coefficient per class: each penalty per class, or one penalty
shared across the classes of a feature.

A task with several classes holds its coefficients as one flat vector, class after class
(:func:`flat_names`). A penalty the user gives (l1, l2, elastic net, group) applies to every
class's coefficients, as if written once per class: :func:`per_class` turns it into the same
penalty on the flat vector, so its value, conjugate and shrink factor are those of the penalty
itself. :func:`shared` ties a feature's coefficients in every class together:

    strength * sum_j c_j sqrt(K) ||(w_j1, ..., w_jK)||_2        (K classes carrying coefficients)

a group lasso whose groups are the features (the sqrt of the group size as in
:func:`learnopt.terms.penalties.group`), so a feature leaves every class at once. In a task with
one coefficient per feature the same penalty is strength * sum_j c_j |w_j|.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar, Sequence

from learnopt.core import checks as params
from learnopt.core.errors import DataError, ParameterError
from learnopt.terms.penalty_base import Penalty, factor_array, freeze_factors, name_list
from learnopt.terms.separable import Separable
from learnopt.terms.structured import Group


def flat_name(label, name: str) -> str:
    """The name of feature ``name``'s coefficient for class ``label`` in the flat vector."""
    return f"{label}:{name}"


def flat_names(names: Sequence[str], labels: Sequence) -> tuple[str, ...]:
    """Every coefficient of a task with several classes, class after class."""
    return tuple(flat_name(label, n) for label in labels for n in names)


@dataclass(frozen=True)
class Shared(Penalty):
    """strength * sum_j c_j sqrt(K) ||w_j.||_2 over each feature's coefficients in all K classes;
    ``features``: the features it covers (default all), ``factors``: per feature (default 1)."""

    strength: float = 1.0
    features: tuple[str, ...] | None = None
    factors: tuple | None = None
    name: ClassVar[str] = "shared"
    cone: ClassVar[str] = "second_order"

    def __post_init__(self):
        params.check("shared", strength=(self.strength, params.NONNEGATIVE))

    def describe(self):
        return f"shared(strength={self.strength:g}" + (f", {len(self.features)} features)" if self.features else ")")

    def covered(self, names) -> tuple[str, ...]:
        return tuple(names) if self.features is None else self.features

    def across(self, names, labels) -> Group:
        """The group lasso over the flat vector: one group per feature, its coefficient in every class."""
        covered = self.covered(names)
        unknown = [f for f in covered if f not in names]
        if unknown:
            raise DataError(f"shared: unknown features {unknown}; the features are {list(names)}.")
        c = factor_array(self.factors, covered, "shared")
        return Group(self.strength, tuple(tuple(flat_name(label, f) for label in labels) for f in covered), tuple(c))

    def _single(self, names) -> Group:          # one coefficient per feature: groups of one
        covered = self.covered(names)
        return Group(self.strength, tuple((f,) for f in covered), tuple(factor_array(self.factors, covered, "shared")))

    def expr(self, w, names):
        return self._single(names).expr(w, names)

    def value(self, w, names):
        return self._single(names).value(w, names)

    def null_space(self, names):
        return self._single(names).null_space(names)

    def conjugate(self, g, names):
        return self._single(names).conjugate(g, names)

    def conjugate_expr(self, v, names):
        return self._single(names).conjugate_expr(v, names)

    def shrink(self, g, names):
        return self._single(names).shrink(g, names)


def shared(strength: float, features: Sequence[str] | None = None, *, factors=None) -> Shared:
    """A penalty that keeps or drops each feature in every class at once (group lasso across classes)."""
    listed = None if features is None else name_list(features, "shared", "features",
                                                     "a list of feature names (default: every feature)")
    return Shared(strength, listed, freeze_factors(factors, "shared"))


def per_class(penalty: Penalty, names: Sequence[str], labels: Sequence) -> Penalty:
    """``penalty`` applied to every class's coefficients, as one penalty on the flat vector."""
    names = tuple(names)
    k = len(labels)
    if isinstance(penalty, Shared):
        return penalty.across(names, labels)
    if isinstance(penalty, Separable):
        c = factor_array(penalty.factors, names, penalty.describe_name())
        return Separable(penalty.strength, penalty.mix, tuple(c.tolist() * k))
    if isinstance(penalty, Group):
        groups = tuple(tuple(flat_name(label, n) for n in g) for label in labels for g in penalty.groups)
        factors = None if penalty.factors is None else tuple(penalty.factors) * k
        Group(penalty.strength, penalty.groups, penalty.factors)._index(names)    # unknown names named here
        return Group(penalty.strength, groups, factors)
    raise ParameterError(f"penalize({penalty.describe()}): a task with several classes takes the penalties l1, l2, "
                         f"elastic_net, group (each applied to every class) and shared (one feature across the "
                         f"classes); {penalty.describe()} is not available there yet.", parameters=("penalty",))
