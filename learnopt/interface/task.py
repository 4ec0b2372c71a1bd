"""The task builder: data + loss + penalties + requirements (+ intercept, row weights), and
the verbs a user calls on it (require, check, solve, path, cross_validate, compare).

Tasks are immutable: ``penalize`` and ``require`` return a new task and leave the original as
it was, so one base task can be varied freely. The objective's convention is documented on
:class:`~learnopt.problem.problem.Problem`.
"""
from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Sequence

import os

import numpy as np

from learnopt.centres.result import CentresFit
from learnopt.centres.saved import from_saved
from learnopt.core import checks as params
from learnopt.core.errors import ParameterError
from learnopt.core.files import read_model
from learnopt.data.gateway import from_data
from learnopt.data.shaping import FORMS, shaped_dataset
from learnopt.interface.classes_task import ClassesTask, class_scope, label_count, several_classes
from learnopt.problem.formulate import build, one_row
from learnopt.problem.problem import Problem
from learnopt.rules.objects import as_spec, compile_all
from learnopt.rules.requirements import RuleSpec
from learnopt.rules.shapes import Shape, read_words
from learnopt.scale.partitions import compile_rules
from learnopt.selection.crossval import cross_validate
from learnopt.selection.paths import path
from learnopt.scale.cluster import ClusterSettings
from learnopt.solve.by_group import GroupFits, fit_by
from learnopt.solve.classes_fit import ClassesFit
from learnopt.solve.fit import Fit
from learnopt.solve.loop import compare
from learnopt.solve.screening import solve_screened
from learnopt.solve.routes.base import Settings
from learnopt.terms import losses as _losses
from learnopt.terms.convexity import Verdict, require_convex

@dataclass(frozen=True, eq=False, repr=False)
class Task(Problem):
    """A learning task: the problem value (:class:`~learnopt.problem.problem.Problem`) with the
    verbs a user calls. Build it with :func:`regression` or :func:`classification`.

    Tasks are immutable: ``penalize`` and ``require`` return a new task and leave the original
    as it was, so one base task can be varied freely.
    """

    # ---- building
    def require(self, *rules: str | RuleSpec, for_class=None) -> "Task":
        """A new task with these requirements added (rule text or rule objects).

        Raises NotConvexError for a rule that is not convex and DataError for unknown names,
        listing every problem at once. ``for_class`` (and "... for class X") belong to targets
        of three or more labels.
        """
        if len(rules) == 1 and isinstance(rules[0], (list, tuple)):
            rules = tuple(rules[0])
        scoped = [r for r in rules if isinstance(r, str) and class_scope(r)]
        if for_class is not None or scoped:
            what = f"for_class={for_class!r}" if for_class is not None else f"rule {scoped[0]!r}"
            raise ParameterError(f"{what}: a rule for one class needs a target of three or more labels; this "
                                 f"{self.kind} task has {'two classes' if self.kind == 'classification' else 'one target'}"
                                 f". Drop the class from the rule.", parameters=("for_class",))
        specs = tuple(as_spec(r) for r in rules)
        rows: list[str] = []
        if self.sharded:
            compiled, rows = compile_rules(self, specs)      # mean/sum of predictions by one pass
        else:
            compiled = compile_all(specs, self.context())
        return replace(self, rules=self.rules + specs, requirements=self.requirements + tuple(compiled),
                       row_rules=self.row_rules + tuple(rows))

    def shape(self, feature: str, shape: str, *, pieces: int = 8, form: str = "lines") -> "Task":
        """A new task with one numeric feature's effect shaped: ``shape`` is one or two of the words
        increasing, decreasing, convex, concave (e.g. "increasing concave").

        The feature becomes a basis (:mod:`learnopt.data.shaping`): ``form="lines"`` a
        piecewise-linear spline (coefficients ``feature.slope``, ``feature.turn1``, ...),
        ``form="steps"`` a step function (``feature.step1``, ...), with knots at ``pieces``
        quantiles of the training values; the shape is a rule on those coefficients
        (:mod:`learnopt.rules.shapes`), priced like any rule. Shape features before adding
        penalties and rules. ``fit.shape_table(feature)`` gives the fitted effect.
        """
        params.check(f"shape of {feature!r}: shape", pieces=(pieces, params.Condition(
            "a whole number, at least 2", lambda v: isinstance(v, (int, np.integer)) and not isinstance(v, bool)
            and v >= 2)), form=(form, params.OneOf(FORMS)))
        if self.penalties or any(not isinstance(r, Shape) for r in self.rules):
            added = "penalties" if self.penalties else "rules"
            raise ParameterError(f"shape({feature!r}, {shape!r}) after {added}: shape features first, then penalize "
                                 f"and require (their names change: {feature!r} becomes a basis), e.g. "
                                 f"lo.regression(...).shape({feature!r}, {shape!r}).require(...)")
        if self.sharded:
            raise ParameterError(f"shape({feature!r}, {shape!r}): shaped effects need the data in memory; this "
                                 f"task's data is sharded ({self.dataset.label}). Load it into a pandas DataFrame.")
        words = read_words(feature, shape, form)
        ds, basis = shaped_dataset(self.dataset, feature, int(pieces), form, self.intercept)
        return replace(self, dataset=ds, rules=(), requirements=()).require(*self.rules, Shape(feature, words, form,
                                                                                           basis.names))

    # ---- verdict
    def check(self) -> Verdict:
        """Convexity verdict and data findings, without solving (looks at a one-row stand-in:
        more rows only repeat the loss term, so nothing row-sized is built)."""
        argument = ("convex in the linear predictor (log link)" if self.loss.argument == "linear"
                    else f"convex, {self.loss.argument} loss")
        pieces = [(f"loss {self.loss.describe()}", f"{argument}, "
                   f"{'smooth' if self.loss.smooth else 'piecewise'}; needs {self.loss.cone} cone")]
        pieces += [(f"penalty {p.describe()}", f"convex; needs {p.cone} cone") for p in self.penalties]
        for r in self.requirements:
            fact = ("norm bounded above: a convex set" if r.sense == "norm"
                    else f"linear {'equality' if r.sense == '==' else 'inequality'} ({r.rows} row{'s' * (r.rows > 1)})")
            pieces.append((f"rule «{r.text}»", f"{fact}: {r.note}" if r.note else fact))
        reasons = []
        try:
            if not one_row(self).is_dcp():
                reasons.append("learnopt's own verdict says convex but cvxpy's DCP check disagrees; "
                               "this is a learnopt bug, please report it with the task.")
        except Exception as exc:  # noqa: BLE001 - surfaced in the verdict
            reasons.append(f"the problem could not be built: {exc}")
        return Verdict(not reasons, self.class_label(), pieces, reasons, list(self.dataset.notes))

    def problem(self):
        """The underlying cvxpy.Problem (direct formulation), for people who want to go further.

        Variables: ``theta`` = (coefficients in :attr:`features` order, then the intercept).
        """
        self._in_memory("problem()")
        return build(self).problem

    def _in_memory(self, what: str) -> None:
        if self.sharded:
            raise ParameterError(f"{what} needs the data in memory; this task's data is sharded "
                                 f"({self.dataset.label}). Solve it with task.solve(), or load a sample "
                                 f"into a pandas DataFrame for {what}.")

    # ---- solving
    def solve(self, solver: str | None = None, *, tol: float = 1e-9, gap_tol: float = 1e-7,
              feas_tol: float = 1e-6, route: str | None = None, fallback: bool = True,
              time_limit: float | None = None, polish: bool = False,
              solver_options: dict | None = None, verbose: bool = False, client=None,
              progress: bool | None = None, start=None):
        """Solve and certify; return a :class:`~learnopt.solve.fit.Fit`.

        Parameters
        ----------
        solver : name from the registry (clarabel, osqp, scs, ecos, highs); default: chosen by
            problem class. The next capable solver is tried when one fails, unless fallback=False.
        tol : solver tolerance, mapped to each solver's own options.
        gap_tol, feas_tol : the certificate passes ("optimal") when gap / max(1, |objective|)
            <= gap_tol and every requirement holds within feas_tol (relative to its numbers).
        route : how to solve ("direct", ...); default: planned from the task's structure and
            named in ``fit.route``.
        time_limit : seconds allowed per solver attempt. Passed to solvers that have a limit of
            their own (all but ECOS); an attempt that runs over is recorded in ``fit.attempts``
            and the next solver is tried. Its point is kept if nothing better is found.
        polish : when a solver's point fails the certificate, re-solve with the same solver
            (warm-started) at tol/1e3 and tol/1e6 before moving down the chain.
        solver_options : extra options passed unchanged to the solver (its own names).
        verbose : show the solver's own log.
        client : sharded data only: a ``distributed.Client`` or a scheduler address (default:
            dask's current client, else a local cluster learnopt starts).
        progress : a line on stderr per certificate check and solver attempt once the fit has run
            for 2 seconds (sharded data: a line per round of passes); None: only on a terminal.
        start : a point to start from (coefficients then the intercept, like ``fit.theta``), for
            the iterative routes; the answer is certified as always, wherever it starts.
        """
        settings = Settings(tol=tol, gap_tol=gap_tol, feas_tol=feas_tol, time_limit=time_limit, polish=polish,
                            fallback=fallback, solver_options=dict(solver_options or {}), verbose=verbose,
                            start=None if start is None else _start(self, start))
        cluster = None if client is None and progress is None else ClusterSettings(client=client, progress=progress)
        return solve_screened(self, settings, solver=solver, route=route, cluster=cluster, progress=progress)

    def path(self, penalty=None, grid: Sequence[float] | None = None, n: int = 50, *, ratio: float | None = None,
             route: str | None = None, solver: str | None = None, tol: float = 1e-9, gap_tol: float = 1e-7,
             feas_tol: float = 1e-6, progress: bool | None = None):
        """Solve along a grid of strengths of one penalty; return a :class:`~learnopt.selection.paths.Path`.

        Parameters
        ----------
        penalty : the penalty whose strength varies: one of the task's penalties (object or
            index; default the first) or a new one (added, its own strength ignored).
        grid : strengths in the task's own scaling (any order; walked from strong to weak).
            Default: ``n`` strengths from the smallest strength that zeroes every penalised
            coefficient down, evenly spaced on a log scale, to an end read from the data (where a
            further decade of weaker penalty lowers the training loss by under 1% of its fall so
            far; 6 decades at most) or to ``ratio`` times the top when given. ``path.stopped``
            says why the path ends where it does.
        progress : progress bar (rich) on a terminal; None: only when stderr is a terminal.

        The problem is compiled once (the strength is a cvxpy Parameter), each point starts
        from the previous one, and each point is certified; requirements hold at every point.
        """
        self._in_memory("path()")
        return path(self, penalty, grid, n, ratio=ratio, route=route, solver=solver, tol=tol,
                    gap_tol=gap_tol, feas_tol=feas_tol, progress=progress)

    def cross_validate(self, folds: int = 5, grid: Sequence[float] | None = None, metric=None, seed: int = 0,
                       groups=None, *, ordered: bool = False, penalty=None, n: int = 20, ratio: float | None = None,
                       route: str | None = None, solver: str | None = None, tol: float = 1e-9,
                       gap_tol: float = 1e-7, feas_tol: float = 1e-6, progress: bool | None = None):
        """k-fold cross-validation of one penalty's strength; a :class:`~learnopt.selection.crossval.CrossValidation`.

        Folds: random with ``seed`` (default), by ``groups`` (a column name or one label per
        row; a group is never split), or ``ordered=True`` for time-ordered rows (forward
        chaining). Each fold walks the grid as a path (compiled once per fold, warm-started)
        with every requirement. ``metric``: the task's own loss (default), "mse", "mae",
        "pinball(tau)", "accuracy", "zero_one", "hinge", "log_loss", or f(y_true, score)
        (classification targets are +1/-1, scores are X w + b). Default grid: ``n``
        strengths from the zeroing strength on all rows down to the end a path reads
        from the data (or ``ratio`` times the top when given).
        """
        self._in_memory("cross_validate()")
        return cross_validate(self, folds, grid, metric, seed, groups, ordered=ordered, penalty=penalty, n=n,
                              ratio=ratio, route=route, solver=solver, tol=tol, gap_tol=gap_tol,
                              feas_tol=feas_tol, progress=progress)

    def fit_by(self, column: str, *, jobs: int | None = None, progress: bool | None = None, tol: float = 1e-9,
               gap_tol: float = 1e-7, feas_tol: float = 1e-6) -> GroupFits:
        """One fit per group: this task (loss, penalties, rules) fitted on the rows of each value of
        ``column``, each rule compiled again on that group's rows, each fit certified; a
        :class:`~learnopt.solve.by_group.GroupFits` with one table of fits and a predict that sends
        each new row to its group's coefficients. ``jobs``: worker processes (-1: one per core;
        None: every core beyond 200 groups)."""
        self._in_memory("fit_by()")
        return fit_by(self, column, jobs=jobs, progress=progress, tol=tol, gap_tol=gap_tol, feas_tol=feas_tol)

    def compare(self, solvers: Sequence[str] = ("clarabel", "osqp", "scs", "ecos", "highs"), *,
                tol: float = 1e-9, gap_tol: float = 1e-7, feas_tol: float = 1e-6):
        """Solve the same task with each solver (no fallback); one row per solver.

        Columns: status, objective, gap (learnopt's certificate), violation, steps (the solver's
        iterations, or the route's outer steps),
        build/compile/solve/certify/total seconds, note, and max_coef_diff (largest coefficient
        difference from the certified row with the lowest objective). Solvers that are not
        installed or cannot handle the problem class get a row with the reason.
        """
        self._in_memory("compare()")
        return compare(self, list(solvers), tol=tol, gap_tol=gap_tol, feas_tol=feas_tol)



def _start(task, start) -> np.ndarray:
    point = np.asarray(start, dtype=float).ravel()
    p = len(task.coefficient_names)
    if point.shape != (p,) or not np.all(np.isfinite(point)):
        raise params.refusal("solve", "start", start, f"{p} finite numbers: the coefficients in the task's order"
                             f"{', then the intercept' if task.intercept else ''} (like fit.theta)")
    return point


def _loss(obj: _losses.Loss, kind: str) -> _losses.Loss:
    """Check that a (convex) loss object suits the task kind."""
    if isinstance(obj, _losses.Custom):
        require_convex(obj.fn, 5, f"Custom loss {obj.describe()!r}", "z")
        return obj
    allowed = _losses.for_kind(kind)
    if obj.name not in allowed:
        other = "lo.classification" if kind == "regression" else "lo.regression"
        raise ParameterError(f"The {obj.describe()} loss is not a {kind} loss; use it with {other}, or "
                             f"pick one of {', '.join(allowed)}.")
    return obj


def _build(kind, data, target, loss, features, weights, intercept, positive, offset=None, exposure=None) -> Task:
    if not isinstance(intercept, (bool, np.bool_)):
        raise params.refusal(kind, "intercept", intercept, "True or False")
    lossobj = _losses.by_name(loss)
    if not lossobj.convex:
        raise lossobj.refusal()
    ds = from_data(data, target, kind=kind, features=features, weights=weights,
                   intercept=bool(intercept), positive=positive, offset=offset, exposure=exposure)
    lossobj = _loss(lossobj, kind)
    if not ds.sharded:
        lossobj.check_target(ds.y, repr(target) if isinstance(target, str) else "array")
    if kind == "classification" and lossobj.argument == "residual" and lossobj.name != "squared":
        raise ParameterError(f"The {lossobj.describe()} loss needs a numeric target; use lo.regression.")
    return Task(ds, kind, lossobj, bool(intercept), target if isinstance(target, str) else None)


def regression(data, target, loss: _losses.Loss | str = "squared", *, features: Sequence[str] | None = None,
               weights=None, intercept: bool = True, offset=None, exposure=None) -> Task:
    """Build a regression task.

    Parameters
    ----------
    data : DataFrame, CSV/Parquet path, or numpy / scipy.sparse matrix.
    target : column name (DataFrame) or the array of targets (arrays).
    loss : a loss object (``lo.loss.huber(2.0)``) or the name of a parameter-free loss.
    features : columns to use; default all columns except the target and weights.
    weights : column name or array of non-negative row weights (weight k == k copies of the row).
    intercept : fit an unpenalised intercept (default True).
    offset : column name or array added to each row's linear predictor with its coefficient
        fixed at 1 (kept out of the features); for residual losses the residual is
        x'w + b + offset - y.
    exposure : column name or array of values above 0 whose log is the offset (counts and
        amounts per unit of exposure with the log-link losses ``poisson``, ``gamma``,
        ``tweedie``). Give one of offset and exposure. New rows need the same column to be
        predicted; ``fit.predict`` gives the mean exp(x'w + b + offset) for log-link losses and
        ``fit.decision`` the linear predictor x'w + b + offset.

    Examples
    --------
    >>> import numpy as np, learnopt as lo
    >>> rng = np.random.default_rng(0)
    >>> X = rng.normal(size=(40, 2)); y = X @ [1.0, -2.0] + 0.5
    >>> fit = lo.regression(X, y).solve()
    >>> fit.status, np.round(fit.coef.to_numpy(), 6).tolist(), round(fit.intercept, 6)
    ('optimal', [1.0, -2.0], 0.5)
    """
    return _build("regression", data, target, loss, features, weights, intercept, None, offset, exposure)


def classification(data, target, loss: _losses.Loss | str = "logistic", *, positive=None,
                   features: Sequence[str] | None = None, weights=None, intercept: bool = True,
                   reference=None) -> Task | ClassesTask:
    """Build a classification task.

    Two labels: a binary task, labels mapped to -1/+1; ``positive`` is the label mapped to +1
    (default: the label that sorts last). Margin losses: hinge, squared_hinge, logistic
    (default); squared regresses the -1/+1 labels.

    Three or more labels (data in memory): a :class:`~learnopt.interface.classes_task.ClassesTask`
    with one coefficient per feature and class; ``logistic`` fits the multinomial loss (softmax
    cross-entropy), ``hinge`` the multiclass hinge of Crammer and Singer. Coefficients no penalty
    acts on sum to zero over the classes, or ``reference=label`` fixes that class's at 0.
    """
    data, count = label_count(data, target)
    if count is not None and count > 2:
        if positive is not None:
            raise ParameterError(f"positive={positive!r}: the target has {count} labels, so no single one is "
                                 f"positive; drop positive=, or give reference= to fix one class's coefficients at 0.",
                                 parameters=("positive",))
        return several_classes(data, target, loss, features=features, weights=weights, intercept=intercept,
                               reference=reference)
    if reference is not None:
        raise ParameterError(f"reference={reference!r}: a reference class applies to a target of three or more "
                             f"labels; for two labels give positive= instead.", parameters=("reference",))
    return _build("classification", data, target, loss, features, weights, intercept, positive)


def load_fit(path) -> Fit | ClassesFit | CentresFit:
    """Read a fit saved with ``fit.save(path)``: a regression or classification :class:`Fit`
    (it predicts exactly as the saved one did), a fit with several classes, or a
    :class:`CentresFit` (it assigns new points to the saved centres). Its ``task`` describes the problem (no training data)."""
    saved = read_model(path)
    if saved["task"]["kind"] == "centres":
        return from_saved(saved, os.fspath(path))
    if saved["task"]["kind"] == "classes":
        return ClassesFit.load(path, task_type=ClassesTask)
    return Fit.load(path, task_type=Task)
