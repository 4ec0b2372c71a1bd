"""The problem value: what the maths layers (routes, certificate, basis change, selection) see.

A :class:`Problem` is frozen: data + loss + penalties + compiled requirements (+ intercept, row
weights inside the data). The user holds a :class:`~learnopt.interface.task.Task`, which is a
Problem with verbs (require, check, solve, path, ...); the layers below see only this value.

Objective (the convention everywhere in learnopt)::

    minimise  sum_i a_i f(z_i) + sum_k R_k(w)      a_i = weight_i / sum(weights)

i.e. the weighted *mean* of the loss over rows plus the penalties; the intercept is never
penalised.
"""
from __future__ import annotations

import dataclasses
from dataclasses import dataclass, field, replace

import cvxpy as cp

from learnopt.core.checks import shown
from learnopt.core.errors import ParameterError
from learnopt.data.table import design_with_ones
from learnopt.rules.requirements import Context, Requirement, RuleSpec
from learnopt.terms.convexity import require_convex
from learnopt.terms.losses import Loss
from learnopt.terms.penalties import CustomPenalty, Penalty
from learnopt.terms.cones import CLASS_LABEL, problem_class

SHARDED_ROWS = ("this rule object needs the data rows, which live in the partitions of sharded data; "
                "write it as rule text (rules on predictions are compiled inside each partition).")


@dataclass(frozen=True, eq=False)
class Problem:
    """A learning problem as a value. Build one with ``lo.regression`` / ``lo.classification``.

    Attributes
    ----------
    dataset : the validated data (in memory or sharded; see :mod:`learnopt.data.gateway`).
    kind : "regression" or "classification".
    loss, penalties : the convex building blocks (:mod:`learnopt.terms`).
    intercept : fit an unpenalised intercept.
    target_name : the target column's name (None for an array target).
    rules : the rules as the user wrote them; requirements : what they compile to, over
        theta = (coefficients, intercept).
    row_rules : sharded data only: rules on predictions row by row, compiled in each partition.
    """

    dataset: object
    kind: str
    loss: Loss
    intercept: bool
    target_name: object
    penalties: tuple[Penalty, ...] = ()
    rules: tuple[RuleSpec, ...] = ()
    requirements: tuple[Requirement, ...] = field(default=())
    row_rules: tuple[str, ...] = ()

    # ---- names
    @property
    def features(self) -> tuple[str, ...]:
        """Coefficient names, in the order of the coefficient vector."""
        return self.dataset.names

    @property
    def coefficient_names(self) -> tuple[str, ...]:
        return self.dataset.names + (("intercept",) if self.intercept else ())

    @property
    def sharded(self) -> bool:
        """Does the data live on a dask cluster (a dask DataFrame or a file pattern)?"""
        return self.dataset.sharded

    def as_problem(self) -> "Problem":
        """This value as a plain Problem (a Task without its verbs)."""
        if type(self) is Problem:
            return self
        return Problem(**{f.name: getattr(self, f.name) for f in dataclasses.fields(Problem)})

    def context(self) -> Context:
        """What rules compile against: the names, and (in memory) the design rows and data columns."""
        enc = self.dataset.encoding
        reference, former = (enc.reference_names, enc.former_names) if enc is not None else ((), {})
        if self.sharded:
            return Context(self.coefficient_names, None, None, reference, former, no_rows=SHARDED_ROWS, encoding=enc)
        Xt = design_with_ones(self.dataset.X, self.intercept)   # sparse stays sparse: rules take rows of it
        return Context(self.coefficient_names, Xt, self.dataset.frame, reference, former, encoding=enc)

    # ---- varying
    def penalize(self, *penalties: Penalty) -> "Problem":
        """A new value with these penalties added (see :mod:`learnopt.terms.penalties`)."""
        bad = [p for p in penalties if not isinstance(p, Penalty)]
        if bad:
            raise ParameterError(f"penalize({', '.join(shown(p) for p in penalties)}): each argument has to be "
                                 f"a penalty object such as lo.penalty.l1(0.1); {', '.join(map(shown, bad))} "
                                 f"{'is' if len(bad) == 1 else 'are'} not")
        for p in penalties:
            self._check_penalty(p)
        return replace(self, penalties=self.penalties + tuple(penalties))

    def _check_penalty(self, p: Penalty) -> None:
        names = self.features
        if isinstance(p, CustomPenalty):
            require_convex(p.fn, len(names), f"Custom penalty {p.describe()!r}", "w")
            return
        p.expr(cp.Variable(len(names)), names)   # resolves names; raises DataError on unknown names

    def with_strength(self, index: int, strength: float) -> "Problem":
        """A new value with penalty ``index`` at ``strength`` (paths and cross-validation)."""
        pens = list(self.penalties)
        pens[index] = pens[index].with_strength(float(strength))
        return replace(self, penalties=tuple(pens))

    # ---- facts
    def problem_class(self, loss_cone: str | None = None) -> str:
        """The widest cone class the pieces need (``loss_cone`` replaces the loss's own)."""
        cones = [loss_cone or self.loss.cone] + [p.cone for p in self.penalties]
        cones += ["second_order" if r.sense == "norm" and r.order == 2 else "linear" for r in self.requirements]
        return problem_class(cones)

    def class_label(self) -> str:
        """The problem class in words (linear program, quadratic program, ...)."""
        return CLASS_LABEL[self.problem_class()]

    def __repr__(self) -> str:
        return (f"{type(self).__name__}({self.kind}, loss={self.loss.describe()}, {self.dataset.n} rows x "
                f"{self.dataset.d} features, intercept={self.intercept}, "
                f"penalties=[{', '.join(p.describe() for p in self.penalties)}], "
                f"rules={[r.text for r in self.rules]})")
