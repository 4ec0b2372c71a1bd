"""Solve a task: plan the route, walk the solver chain, certify, assemble the fit.

A solver's own status is never taken as evidence: "optimal" comes only from learnopt's
certificate; "infeasible" only when the elastic relaxation confirms that the requirements
cannot hold together; otherwise the next capable solver is tried and the attempt recorded.
"""
from __future__ import annotations

import contextlib
import os
import sys
import time
import warnings

import cvxpy as cp
import numpy as np
import pandas as pd

from . import params
from .certify import certify
from .errors import SolverError
from .fit import Attempt, Fit, Timings
from .routes import direct, plan as plan_route
from .solvers import plan as plan_solvers


@contextlib.contextmanager
def _quiet(enabled: bool):
    """Silence a solver's own start-up banner written straight to the C-level stdout."""
    if not enabled:
        yield
        return
    try:
        fd = sys.stdout.fileno()
    except (AttributeError, OSError, ValueError):
        yield
        return
    sys.stdout.flush()
    saved = os.dup(fd)
    try:
        with open(os.devnull, "w") as null:
            os.dup2(null.fileno(), fd)
            yield
    finally:
        os.dup2(saved, fd)
        os.close(saved)


def _certify(task, model, theta, mults):
    return certify(M=model.M, q=model.q, a=model.a, loss=task.loss, penalties=task.penalties,
                   names=task.features, requirements=list(task.requirements), theta=theta,
                   u=direct.dual_point(task, model, theta), multipliers=mults,
                   intercept=task.intercept)


def _prices(model, mults, theta, feas_tol, noise):
    prices, binding = {}, {}
    for (r, _), m in zip(model.constraints, mults):
        value = float(np.sum(m)) if r.sense != "norm" else float(m)
        if r.sense == "<=" or r.sense == "norm":
            value = max(value, 0.0)
        if abs(value) <= noise:   # solver round-off on a rule that does not bind
            value = 0.0
        prices[r.text] = prices.get(r.text, 0.0) + value
        active = bool(np.min(r.slack(theta)) <= feas_tol * r.scale()) if r.sense != "==" else True
        binding[r.text] = binding.get(r.text, False) or active
    return pd.Series(prices, dtype=float), pd.Series(binding, dtype=bool)


def solve_task(task, *, solver, tol, gap_tol, feas_tol, route, fallback, solver_options, verbose) -> Fit:
    params.check("solve", tol=(tol, params.POSITIVE), gap_tol=(gap_tol, params.POSITIVE),
                 feas_tol=(feas_tol, params.POSITIVE))
    t_start = time.perf_counter()
    route = plan_route(task, route)
    klass = task.problem_class()
    chain = plan_solvers(klass, solver, fallback=fallback)
    model = direct.build(task)
    attempts: list[Attempt] = []
    best = None          # (rel_gap, spec, theta, cert, timings)
    verdict = None       # "infeasible" / "unbounded" once confirmed
    conflicts = {}
    for spec in chain:
        t0 = time.perf_counter()
        opts = {**spec.options(tol), **solver_options}
        try:
            with warnings.catch_warnings(), _quiet(not verbose):
                warnings.simplefilter("ignore")
                model.problem.solve(solver=spec.cvxpy_name, verbose=verbose, **opts)
        except (cp.error.SolverError, ValueError, ArithmeticError, RuntimeError) as exc:
            attempts.append(Attempt(spec.name, f"error: {str(exc).splitlines()[0][:200]}",
                                    seconds=time.perf_counter() - t0))
            continue
        wall = time.perf_counter() - t0
        status = model.problem.status
        compile_s = float(getattr(model.problem, "compilation_time", None) or 0.0)
        stats = model.problem.solver_stats
        solve_s = float(stats.solve_time) if stats is not None and stats.solve_time else max(wall - compile_s, 0.0)
        if status in (cp.INFEASIBLE, cp.INFEASIBLE_INACCURATE):
            found = direct.elastic(task)
            if found:
                attempts.append(Attempt(spec.name, f"{status}; confirmed by the elastic relaxation", seconds=wall))
                verdict, conflicts = "infeasible", found
                break
            attempts.append(Attempt(spec.name, f"{status}, but the requirements can all hold: "
                                    f"the solver's claim is rejected", seconds=wall))
            continue
        if status in (cp.UNBOUNDED, cp.UNBOUNDED_INACCURATE):
            attempts.append(Attempt(spec.name, status, seconds=wall))
            if sum(a.outcome.startswith("unbounded") for a in attempts) >= 2 or spec is chain[-1]:
                verdict = "unbounded"
                break
            continue
        theta = model.theta.value
        if theta is None or not np.all(np.isfinite(theta)):
            attempts.append(Attempt(spec.name, f"{status}; no usable point returned", seconds=wall))
            continue
        theta = np.asarray(theta, float).copy()
        t1 = time.perf_counter()
        mults = direct.multipliers(model)
        cert = _certify(task, model, theta, mults)
        cert_s = time.perf_counter() - t1
        ok = cert.passes(gap_tol, feas_tol)
        attempts.append(Attempt(spec.name, f"{status}; certificate {'passed' if ok else 'failed'}",
                                cert.primal, cert.gap, wall + cert_s))
        timing = Timings(model.build_seconds, compile_s, solve_s, cert_s)
        prices = _prices(model, mults, theta, feas_tol, gap_tol * max(1.0, abs(cert.primal)) * 1e-2)
        key = (not ok, cert.rel_violation > feas_tol, cert.rel_gap)
        iterations = getattr(stats, "num_iters", None) if stats is not None else None
        if best is None or key < best[0]:
            best = (key, spec, theta, cert, timing, prices, iterations)
        if ok:
            break
    total = time.perf_counter() - t_start
    return _assemble(task, route, attempts, best, verdict, conflicts, gap_tol, feas_tol, total)


def _assemble(task, route, attempts, best, verdict, conflicts, gap_tol, feas_tol, total) -> Fit:
    names = list(task.features)
    empty = pd.Series(dtype=float)
    if best is None:
        if verdict == "infeasible":
            status, msg = "infeasible", ("the requirements cannot hold together; fit.conflicts lists "
                                         "the rules that must give and by how much")
        elif verdict == "unbounded":
            status, msg = "unbounded", ("the objective can decrease without limit; add a penalty or "
                                        "bounds on the coefficients")
        else:
            status, msg = "failed", ("no solver returned a usable point: " +
                                     "; ".join(f"{a.solver}: {a.outcome}" for a in attempts))
        nan = np.full(len(names), np.nan)
        return Fit(status, msg, np.nan, np.nan, np.nan, np.nan, pd.Series(nan, index=names, name="coef"),
                   np.nan, empty, pd.Series(dtype=bool), pd.Series(conflicts, dtype=float),
                   Timings(total=total), None, route, attempts, None, task)
    _, spec, theta, cert, timing, (prices, binding), iterations = best
    timing.total = total
    if cert.passes(gap_tol, feas_tol):
        status, msg = "optimal", (f"certified: relative gap {cert.rel_gap:.2g} <= {gap_tol:g}, "
                                  f"worst violation {cert.rel_violation:.2g} <= {feas_tol:g}")
    else:
        why = []
        if not np.isfinite(cert.gap) or cert.rel_gap > gap_tol:
            why.append(f"relative gap {cert.rel_gap:.3g} > {gap_tol:g}" + (f" ({cert.note})" if cert.note else ""))
        if cert.rel_violation > feas_tol:
            why.append(f"a requirement is violated by {cert.rel_violation:.3g} (relative) > {feas_tol:g}")
        status, msg = "unverified", ("the certificate does not confirm optimality: " + "; ".join(why)
                                     + ". Try a tighter tol or another solver.")
    d = len(names)
    coef = pd.Series(theta[:d], index=names, name="coef")
    intercept = float(theta[d]) if task.intercept else 0.0
    return Fit(status, msg, cert.primal, cert.gap, cert.rel_gap, cert.violation, coef, intercept,
               prices, binding, pd.Series(dtype=float), timing, spec.name, route, attempts, cert, task,
               extras={"iterations": iterations})


def compare(task, solvers, *, tol: float, gap_tol: float, feas_tol: float) -> pd.DataFrame:
    """One row per solver: the same task, no fallback, each point certified by learnopt."""
    from .solvers import lookup
    klass = task.problem_class()
    rows, fits = [], {}
    for name in solvers:
        spec = lookup(name)
        why = spec.why_not(klass)
        if why:
            rows.append({"solver": spec.name, "status": "not run", "note": why})
            continue
        fit = task.solve(spec.name, tol=tol, gap_tol=gap_tol, feas_tol=feas_tol, fallback=False)
        fits[spec.name] = fit
        rows.append({"solver": spec.name, "status": fit.status, "objective": fit.objective, "gap": fit.gap,
                     "violation": fit.violation, "iterations": fit.extras.get("iterations"),
                     **{f"{k}_s": v for k, v in fit.timings.as_dict().items()},
                     "note": "" if fit.status == "optimal" else fit.message})
    table = pd.DataFrame(rows).set_index("solver")
    certified = [n for n, f in fits.items() if f.status == "optimal"]
    pool = certified or [n for n, f in fits.items() if np.all(np.isfinite(f.coef))]
    if pool:
        best = min(pool, key=lambda n: fits[n].objective)
        ref = fits[best].coef.to_numpy()
        table["max_coef_diff"] = [float(np.max(np.abs(fits[n].coef.to_numpy() - ref))) if n in fits else np.nan
                                  for n in table.index]
    return table
