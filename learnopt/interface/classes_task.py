"""Tasks with several classes: the builder (``lo.classification`` with a target of three or more
labels) and the verbs a user calls on the task (penalize, require, check, solve).

The maths are in :mod:`learnopt.problem.classes` (the value and the program),
:mod:`learnopt.solve.classes_solve` and :mod:`learnopt.solve.classes_certificate`.

A rule applies to every class that carries coefficients, or to one class when the text ends in
``for class <label>`` (the label quoted, or bare when it has no spaces), or when ``require`` is
given ``for_class=label``. In a class's rule, names stand for that class's coefficients and
``prediction`` for its score x'w_k + b_k (beside a reference class: the log odds against it).
"""
from __future__ import annotations

import os
import re
from dataclasses import replace
from typing import Sequence

import numpy as np
import pandas as pd

from learnopt.core import checks as params
from learnopt.core.errors import DataError, ParameterError
from learnopt.core.checks import shown
from learnopt.data.gateway import from_data, is_sharded_source
from learnopt.data.table import one_against_rest, read_table
from learnopt.problem.classes import ClassesProblem, ClassRule, formulate
from learnopt.rules.objects import as_spec, compile_all
from learnopt.solve.classes_fit import ClassesFit
from learnopt.solve.classes_solve import solve_classes
from learnopt.terms.across import per_class
from learnopt.terms.class_losses import ClassLoss, for_several
from learnopt.terms.cones import CLASS_LABEL
from learnopt.terms.convexity import Verdict
from learnopt.terms.penalties import Penalty

_SCOPE = re.compile(r"^(?P<rule>.*\S)\s+for\s+class\s+(?P<label>'[^']*'|\"[^\"]*\"|\S+)\s*$", re.S)


def _same_number(label, given) -> bool:
    """Does rule text such as "2" name the numeric label 2.0 (or "2.0" the label 2)?"""
    try:
        return not isinstance(label, (bool, np.bool_)) and float(label) == float(given)
    except (TypeError, ValueError):
        return False


def class_scope(text: str):
    """The match of a trailing "for class <label>" in rule text, or None."""
    return _SCOPE.match(text)


class ClassesTask(ClassesProblem):
    """A task with several classes (build it with :func:`learnopt.classification`)."""

    def penalize(self, *penalties: Penalty) -> "ClassesTask":
        """A new task with these penalties added, each applied to every class's coefficients
        (``lo.penalty.shared`` ties a feature's coefficients across the classes instead)."""
        bad = [p for p in penalties if not isinstance(p, Penalty)]
        if bad:
            raise ParameterError(f"penalize({', '.join(shown(p) for p in penalties)}): each argument has to be "
                                 f"a penalty object such as lo.penalty.l2(0.1); {', '.join(map(shown, bad))} is not")
        for p in penalties:
            per_class(p, self.features, self.carried)          # unknown names and unsupported kinds named here
        return replace(self, penalties=self.penalties + tuple(penalties))

    def require(self, *rules, for_class=None) -> "ClassesTask":
        """A new task with rules added (text or rule objects); see the module docstring for the scope."""
        if len(rules) == 1 and isinstance(rules[0], (list, tuple)):
            rules = tuple(rules[0])
        placed = []
        for r in rules:
            label = None if for_class is None else self._label(for_class, f"require(for_class={for_class!r})")
            if isinstance(r, str) and (m := _SCOPE.match(r)):
                if label is not None:
                    raise ParameterError(f"require({r!r}, for_class={for_class!r}): name the class once, in the "
                                         f"text or in for_class.", parameters=("for_class",))
                label = self._label(m.group("label").strip("'\""), f"rule {r!r}")
                r = m.group("rule")
            placed.append(ClassRule(as_spec(r), label))
        compiled = []
        ctx = self.context()
        for rule in placed:
            targets = self.carried if rule.label is None else (rule.label,)
            for req in compile_all([rule.spec], ctx):
                compiled += [self.embed(req, label, rule.text) for label in targets]
        return replace(self, rules=self.rules + tuple(placed), requirements=self.requirements + tuple(compiled))

    def _label(self, given, where: str):
        for label in self.labels:
            if label == given or str(label) == str(given) or _same_number(label, given):
                if self.reference is not None and label == self.reference:
                    raise ParameterError(f"{where}: class {label!r} is the reference class; its coefficients are "
                                         f"0 by definition. Put the rule on another class, or fit without "
                                         f"reference= (sum-to-zero coefficients).", parameters=("for_class",))
                return label
        raise DataError(f"{where}: {given!r} is not a class of the target{params.nearest(str(given), map(str, self.labels))}"
                        f"; its classes are {list(self.labels)}.")

    def check(self) -> Verdict:
        """Convexity verdict and data findings, without solving."""
        pieces = [(f"loss {self.loss.describe()} over {len(self.labels)} classes",
                   f"convex in the scores, {'smooth' if self.loss.smooth else 'piecewise'}; needs {self.loss.cone} cone"),
                  ("identification", "sum to zero over the classes for coefficients no penalty acts on"
                   if self.reference is None else f"reference class {self.reference!r} (its coefficients are 0)")]
        pieces += [(f"penalty {p.describe()}", f"convex, on every class; needs {p.cone} cone") for p in self.penalties]
        pieces += [(f"rule «{r.text}»", f"linear {'equality' if r.sense == '==' else 'inequality'}"
                    if r.sense != "norm" else "norm bounded above: a convex set") for r in self.requirements]
        notes = list(self.dataset.notes)
        free = {n for n, f in zip(self.features, self.free_features()) if f} | ({"intercept"} if self.intercept else set())
        if self.reference is None:
            for rule in self.rules:
                words = set(re.findall(r"[A-Za-z_][\w.]*", rule.spec.text))
                touched = [n for n in free if n in words]
                if rule.label is None and touched:
                    notes.append(f"rule «{rule.text}» applies to every class, and {', '.join(sorted(touched))} "
                                 f"sum{'s' if len(touched) == 1 else ''} to zero over the classes (no penalty acts "
                                 f"there): a bound on every class pins it near 0; scope the rule with "
                                 f"\"for class ...\" or give reference= if that is not meant.")
        reasons = []
        if not formulate(self).problem.is_dcp():
            reasons.append("learnopt's own verdict says convex but cvxpy's DCP check disagrees; this is a learnopt "
                           "bug, please report it with the task.")
        return Verdict(not reasons, CLASS_LABEL[self.problem_class()], pieces, reasons, notes)

    def solve(self, solver: str | None = None, *, route: str | None = None, tol: float = 1e-9, gap_tol: float = 1e-7,
              feas_tol: float = 1e-6, time_limit: float | None = None, fallback: bool = True,
              solver_options: dict | None = None, verbose: bool = False) -> ClassesFit:
        """Solve and certify; a :class:`~learnopt.solve.classes_fit.ClassesFit` (parameters as
        :meth:`learnopt.Task.solve`). ``route``: "newton" (multinomial loss, l2 penalties, no rules:
        the default there) or "direct" (the whole program to a solver); ``fit.route`` says which."""
        return solve_classes(self, solver=solver, route=route, tol=tol, gap_tol=gap_tol, feas_tol=feas_tol,
                             time_limit=time_limit, fallback=fallback, solver_options=solver_options, verbose=verbose)

    def _not_yet(self, what: str):
        raise ParameterError(f"{what}: a task with several classes does not take this yet; fit one class against "
                             f"the rest (a two-label target) for it, or use task.solve() here.", parameters=(what,))

    def path(self, *args, **kwargs):
        """Not available for several classes yet (refused with the reason)."""
        self._not_yet("path()")

    def cross_validate(self, *args, **kwargs):
        """Not available for several classes yet (refused with the reason)."""
        self._not_yet("cross_validate()")

    def compare(self, *args, **kwargs):
        """Not available for several classes yet (refused with the reason)."""
        self._not_yet("compare()")

    def fit_by(self, *args, **kwargs):
        """Not available for several classes yet (refused with the reason)."""
        self._not_yet("fit_by()")

    def shape(self, *args, **kwargs):
        """Not available for several classes yet (refused with the reason)."""
        self._not_yet("shape()")

    def __repr__(self) -> str:
        return (f"ClassesTask({len(self.labels)} classes, loss={self.loss.describe()}, {self.dataset.n} rows x "
                f"{self.dataset.d} features, penalties=[{', '.join(p.describe() for p in self.penalties)}], "
                f"rules={[r.text for r in self.rules]})")


def label_count(data, target) -> tuple[object, int | None]:
    """(data, number of distinct labels) for in-memory data (a path is read once, here); None
    when the count is not known before the gateway (sharded data, a target that is no column)."""
    if is_sharded_source(data):
        return data, None
    if isinstance(data, (str, os.PathLike)):
        data = read_table(data)
    if isinstance(data, pd.DataFrame) and isinstance(target, str):
        return data, (int(data[target].nunique(dropna=True)) if target in data.columns else None)
    if target is not None and not isinstance(target, str) and np.ndim(target) == 1:
        return data, int(pd.Series(np.asarray(target, dtype=object)).nunique(dropna=True))
    return data, None


def several_classes(data, target, loss, *, features: Sequence[str] | None, weights, intercept: bool,
                    reference=None) -> ClassesTask:
    """A task with several classes; ``loss`` a binary loss with a multiclass version or a class loss."""
    lossobj = for_several(loss)
    ds = from_data(data, target, kind="classes", features=features, weights=weights, intercept=bool(intercept))
    if not isinstance(lossobj, ClassLoss):
        name = loss if isinstance(loss, str) else getattr(loss, "name", shown(loss))
        labels, tname = list(ds.labels), repr(target) if isinstance(target, str) else "array"
        raise ParameterError(f"loss={name!r} with the target {tname} of {len(labels)} labels "
                             f"{labels[:6]}{'...' if len(labels) > 6 else ''}: several classes are fitted with "
                             f"loss='logistic' (multinomial, softmax cross-entropy) or loss='hinge' (the multiclass "
                             f"hinge of Crammer and Singer); for the {name} loss " + one_against_rest(labels, tname),
                             parameters=("loss",))
    if reference is not None and not any(reference == v or str(reference) == str(v) for v in ds.labels):
        raise DataError(f"reference={reference!r} is not a class of the target; its classes are {list(ds.labels)}.")
    ref = None if reference is None else next(v for v in ds.labels if reference == v or str(reference) == str(v))
    return ClassesTask(ds, lossobj, bool(intercept), target if isinstance(target, str) else None, ref)
