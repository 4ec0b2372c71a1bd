"""Solving a task with several classes, then learnopt's own certificate.

Routes: "newton" (the multinomial loss always; the multiclass hinge with l2 penalties and no
rules, by smoothing; see :mod:`learnopt.solve.classes_newton` and
:mod:`learnopt.solve.classes_steps`) and "direct": the whole program to a registry solver (the
next capable solver when one fails or its point is not certified), solved over centred and
scaled columns (:func:`learnopt.problem.classes.formulate`) and mapped back. A newton point the
certificate does not confirm is handed on to the direct route; the certificate is computed on
the original data.
"""
from __future__ import annotations

import time

import numpy as np
import pandas as pd

from learnopt.core import checks as params
from learnopt.core.errors import ParameterError
from learnopt.core.status import Status
from learnopt.problem.classes import ClassesProblem, formulate
from learnopt.rules.requirements import Requirement
from learnopt.solve.certificate import Certificate
from learnopt.solve.classes_certificate import certify_classes
from learnopt.solve.classes_fit import ClassesFit
from learnopt.solve.classes_newton import newton, plain, smoothed_hinge, why_not
from learnopt.terms.class_losses import MulticlassHinge
from learnopt.solve.classes_steps import stepped
from learnopt.solve.routes.base import SOLVER_FAULTS, read_multipliers, run
from learnopt.solve.solvers import plan
from learnopt.solve.timings import Attempt, Timings

BINDS = 1e-6        # a rule binds when its slack is within this (relative to its numbers)


def _identity_rows(problem: ClassesProblem) -> list[Requirement]:
    E = problem.identification()
    if not E:
        return []
    return [Requirement("coefficients sum to zero over the classes", "==", np.vstack(E), np.zeros(len(E)))]


def _start(model, problem) -> np.ndarray | None:
    """The multiclass hinge's dual point from the solver: q_ik = (multiplier of row i, class k) / a_i."""
    if model.margins is None or model.margins.dual_value is None:
        return None
    D = np.clip(np.asarray(model.margins.dual_value, float), 0.0, None)
    sums = D.sum(axis=1, keepdims=True)
    Y = np.zeros_like(D)
    Y[np.arange(len(D)), problem.dataset.y.astype(int)] = 1.0
    return np.where(sums > 0, D / np.where(sums > 0, sums, 1.0), Y)


ROUTES = ("direct", "newton")


def solve_classes(problem: ClassesProblem, *, solver: str | None = None, route: str | None = None, tol: float = 1e-9,
                  gap_tol: float = 1e-7, feas_tol: float = 1e-6, time_limit: float | None = None,
                  fallback: bool = True, solver_options: dict | None = None, verbose: bool = False) -> ClassesFit:
    """Route "newton" (the default for the multinomial loss, and for the multiclass hinge with l2
    penalties and no rules, unless a solver is named) or "direct" (the whole program to a solver);
    a newton point the certificate does not confirm is handed on to the direct route."""
    t_start = time.perf_counter()
    params.check("solve", route=(route, params.OneOf(ROUTES + (None,))), tol=(tol, params.OPEN_UNIT),
                 gap_tol=(gap_tol, params.OPEN_UNIT), feas_tol=(feas_tol, params.OPEN_UNIT))
    if time_limit is not None:
        params.check("solve", time_limit=(time_limit, params.POSITIVE))
    reason = why_not(problem)
    if route == "newton" and reason:
        raise ParameterError(f"solve(route='newton'): {reason}; leave route out or give route='direct'.",
                             parameters=("route",))
    ident = _identity_rows(problem)
    attempts, best, infeasible = [], None, False
    enough = 0.01 * gap_tol
    if route == "newton" or (route is None and reason is None and solver is None):
        start = None
        if isinstance(problem.loss, MulticlassHinge):
            def certified(th, Q):           # the first reading only: the smoothed point is stationary
                return certify_classes(problem, th, Q, [np.zeros(r.rows) for r in ident], requirements=ident,
                                       enough=1.0).rel_gap <= 0.1 * gap_tol
            theta, start, steps, seconds, _ = smoothed_hinge(problem, certified, time_limit=time_limit)
            mults, name = [], "numpy"
        elif plain(problem) is None:
            (theta, steps, seconds), mults, name = newton(problem, time_limit=time_limit), [], "numpy"
        else:
            theta, steps, seconds, mults = stepped(problem, time_limit=time_limit)
            name = "clarabel"
        t_cert = time.perf_counter()
        cert = certify_classes(problem, theta, start, list(mults) + [np.zeros(r.rows) for r in ident],
                               requirements=list(problem.requirements) + ident, enough=enough)
        certify_s = time.perf_counter() - t_cert
        ok = cert.passes(gap_tol, feas_tol)
        attempts.append(Attempt(f"newton ({name})", f"{steps} steps, " + ("certified" if ok else "not certified"),
                                cert.primal, cert.gap, seconds + certify_s))
        best = (theta, cert, name, list(mults), Timings(solve=seconds, certify=certify_s))
        if ok or not fallback:
            return _assemble(problem, best, attempts, False, gap_tol, feas_tol, time.perf_counter() - t_start,
                             route="newton")
    newton_point = best is not None
    model = formulate(problem)
    chain = plan(problem.problem_class(), solver, fallback=fallback)
    for spec in chain:
        t0 = time.perf_counter()
        try:
            status, compile_s, solve_s, _ = run(model.problem, spec, {**spec.settings(tol, time_limit),
                                                                       **(solver_options or {})}, verbose)
        except TypeError as exc:       # an option of the wrong type; without options it is a fault of ours
            if not solver_options:
                raise
            raise params.refusal("solve", "solver_options", solver_options,
                                 f"options {spec.name} accepts, each of the type it expects "
                                 f"({str(exc).splitlines()[0][:200]})") from None
        except SOLVER_FAULTS as exc:
            attempts.append(Attempt(spec.name, f"error: {str(exc).splitlines()[0][:200]}",
                                    seconds=time.perf_counter() - t0))
            continue
        if status in ("infeasible", "infeasible_inaccurate"):
            infeasible = True
            attempts.append(Attempt(spec.name, status, seconds=time.perf_counter() - t0))
            continue
        if model.scaled.value is None:
            attempts.append(Attempt(spec.name, f"{status}: no point", seconds=time.perf_counter() - t0))
            continue
        theta = model.to_theta @ model.scaled.value
        mults = read_multipliers(model.constraints)
        t_cert = time.perf_counter()
        cert = certify_classes(problem, theta, _start(model, problem), mults + [np.zeros(r.rows) for r in ident],
                               requirements=list(problem.requirements) + ident, enough=enough)
        certify_s = time.perf_counter() - t_cert
        ok = cert.passes(gap_tol, feas_tol)
        attempts.append(Attempt(spec.name, "certified" if ok else f"{status}, not certified", cert.primal, cert.gap,
                                time.perf_counter() - t0))
        timings = Timings(build=model.build_seconds, compile=compile_s, solve=solve_s, certify=certify_s)
        if best is not None and newton_point and cert.gap >= best[1].gap:
            continue
        if best is None or cert.gap < best[1].gap:
            best, newton_point = (theta, cert, spec.name, mults, timings), False
        if ok:
            break
    total = time.perf_counter() - t_start
    if infeasible and newton_point and not best[1].passes(gap_tol, feas_tol):
        best = None                   # the newton steps found no point the rules allow; a solver says none exists
    route = "newton" if newton_point else "direct"
    return _assemble(problem, best, attempts, infeasible, gap_tol, feas_tol, total, route=route)


def _assemble(problem, best, attempts, infeasible, gap_tol, feas_tol, total, route="direct") -> ClassesFit:
    labels, names = list(problem.labels), list(problem.features)
    how = "sum to zero" if problem.reference is None else f"reference class {problem.reference!r}"
    common = dict(identification=how, route=route, attempts=tuple(attempts), task=problem)
    if best is None:
        if infeasible:
            status, msg = Status.INFEASIBLE, ("the rules cannot all hold together; loosen or drop one of: "
                                              + "; ".join(r.text for r in problem.rules))
        else:
            status, msg = Status.FAILED, ("no solver returned a usable point: "
                                          + "; ".join(f"{a.solver}: {a.outcome}" for a in attempts))
        nan = pd.DataFrame(np.nan, index=names, columns=labels)
        return ClassesFit(status=status, message=msg, objective=np.nan, gap=np.nan, rel_gap=np.nan,
                          violation=np.nan, coef=nan, intercept=pd.Series(np.nan, index=labels),
                          prices=pd.Series(dtype=float), binding=pd.Series(dtype=bool),
                          timings=Timings(total=total), solver=None, **common)
    theta, cert, solver, mults, timings = best
    status, msg = _verdict(cert, gap_tol, feas_tol)
    W, b = problem.split(theta)
    coef = pd.DataFrame(0.0, index=names, columns=labels)
    intercept = pd.Series(0.0, index=labels)
    for k, label in enumerate(problem.carried):
        coef[label] = W[:, k]
        intercept[label] = b[k]
    prices, binding = _prices(problem, theta, mults)
    return ClassesFit(status=status, message=msg, objective=cert.primal, gap=cert.gap, rel_gap=cert.rel_gap,
                      violation=cert.violation, coef=coef, intercept=intercept, prices=prices, binding=binding,
                      timings=Timings(build=timings.build, compile=timings.compile, solve=timings.solve,
                                      certify=timings.certify, total=total),
                      solver=solver, certificate=cert, **common)


def _verdict(cert: Certificate, gap_tol, feas_tol):
    if cert.passes(gap_tol, feas_tol):
        return Status.OPTIMAL, (f"certified: relative gap {cert.rel_gap:.2g} <= {gap_tol:g}, "
                                f"worst relative violation {cert.rel_violation:.2g} <= {feas_tol:g}")
    why = []
    if not np.isfinite(cert.gap) or cert.rel_gap > gap_tol:
        why.append(f"relative gap {cert.rel_gap:.3g} > {gap_tol:g}" + (f" ({cert.note})" if cert.note else ""))
    if cert.rel_violation > feas_tol:
        why.append(f"a rule is violated by {cert.rel_violation:.3g} (relative) > {feas_tol:g}")
    return Status.UNVERIFIED, ("the certificate does not confirm optimality: " + "; ".join(why)
                               + ". Try a tighter tol or another solver.")


def _prices(problem, theta, mults):
    """Per rule as the user wrote it: the sum of its rows' multipliers, and whether a row binds."""
    prices, binding = {}, {}
    for req, m in zip(problem.requirements, mults):
        key = req.source
        value = float(np.sum(m)) if req.sense == "==" else float(np.sum(np.maximum(m, 0.0)))
        binds = bool(np.min(req.slack(theta), initial=np.inf) <= BINDS * req.scale()) or req.sense == "=="
        prices[key] = prices.get(key, 0.0) + value
        binding[key] = binding.get(key, False) or binds
    return pd.Series(prices, dtype=float), pd.Series(binding, dtype=bool)
