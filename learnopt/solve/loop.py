"""Solve a task: plan the route, walk the solver chain, certify, assemble the fit.

A solver's own status is never taken as evidence: "optimal" comes only from learnopt's
certificate; "infeasible" only when the elastic relaxation confirms that the requirements
cannot hold together; otherwise the next capable solver is tried and the attempt recorded.
"""
from __future__ import annotations

import time

import numpy as np
import pandas as pd

from learnopt.core import checks as params
from learnopt.solve.certificate import certify
from learnopt.solve.fit import Attempt, Fit, Timings
from learnopt.solve.routes import direct
from learnopt.solve.routes import prepare
from learnopt.problem.basis import conditioned
from learnopt.solve.routes.base import SOLVER_FAULTS
from learnopt.problem.algebra import loss_argument, objective
from learnopt.solve.solvers import plan as plan_solvers

POLISH_ROUNDS = 2      # tighter re-solves of one solver before moving down the chain
POLISH_FACTOR = 1e-3   # each polish round divides the tolerance by this much
TOL_FLOOR = 1e-13


def certify_point(task, theta, u, mults, enough: float = 0.0):
    """learnopt's certificate for a point of the task (whatever route produced it)."""
    M, q, a = loss_argument(task)
    return certify(M=M, q=q, a=a, loss=task.loss, penalties=task.penalties, names=task.features,
                   requirements=list(task.requirements), theta=theta, u=u, multipliers=mults,
                   intercept=task.intercept, enough=enough)


def _prices(task, mults, theta, feas_tol, noise):
    prices, binding = {}, {}
    for r, m in zip(task.requirements, mults):
        value = float(np.sum(m)) if r.sense != "norm" else float(m)
        if r.sense == "<=" or r.sense == "norm":
            value = max(value, 0.0)
        if abs(value) <= noise:   # solver round-off on a rule that does not bind
            value = 0.0
        prices[r.text] = prices.get(r.text, 0.0) + value
        active = bool(np.min(r.slack(theta)) <= feas_tol * r.scale()) if r.sense != "==" else True
        binding[r.text] = binding.get(r.text, False) or active
    return pd.Series(prices, dtype=float), pd.Series(binding, dtype=bool)


def solve_task(task, *, solver, tol, gap_tol, feas_tol, route, fallback, solver_options, verbose,
               time_limit=None, polish=False, runner=None, client=None, progress=None) -> Fit:
    """Solve and certify ``task`` (or, with ``runner``, the runner's current task: paths)."""
    params.check("solve", tol=(tol, params.POSITIVE), gap_tol=(gap_tol, params.POSITIVE),
                 feas_tol=(feas_tol, params.POSITIVE))
    if time_limit is not None:
        params.check("solve", time_limit=(time_limit, params.POSITIVE))
    t_start = time.perf_counter()
    original, T = task, None
    if (client is not None or progress is not None) and runner is None and not getattr(task, "sharded", False):
        from learnopt.core.errors import ParameterError
        raise ParameterError("client= and progress= are for sharded data; this task's data is in memory. "
                             "Give a dask DataFrame or a file pattern to fit on a cluster.")
    if runner is None and getattr(task, "sharded", False):
        runner = prepare(task, route, client=client, progress=progress)
    elif runner is None:
        work, T = conditioned(task)          # centred and scaled columns when the data need it
        runner = prepare(work, route)
    task = runner.task
    chain = plan_solvers(runner.problem_class, solver, fallback=fallback, prefer=getattr(runner, "prefer", ()))
    attempts: list[Attempt] = []
    best = None          # (key, solver name, theta, cert, timings, prices, extras)
    verdict = None       # "infeasible" / "unbounded" once confirmed
    conflicts = {}
    done = False         # a point certified within the time limit
    seen = {}            # the last certificate an iterative route asked for, to reuse it

    def check(theta, u, mults):
        if hasattr(runner, "certify"):       # a route with a cheaper exact form of the certificate
            return runner.certify(theta, u, mults, enough=1e-3 * gap_tol)
        return certify_point(task, theta, u, mults, enough=1e-3 * gap_tol)

    def goal(theta, u, mults):
        t = time.perf_counter()
        cert = check(theta, u, mults)
        seen.update(theta=theta.copy(), cert=cert, seconds=seen.get("seconds", 0.0) + time.perf_counter() - t)
        runner.last_certificate = cert       # for routes that report progress
        return cert.passes(gap_tol, feas_tol)

    runner.goal, runner.gap_tol, runner.tol, runner.feas_tol = goal, gap_tol, tol, feas_tol
    for spec in chain:
        rounds = [tol] + ([max(tol * POLISH_FACTOR ** k, TOL_FLOOR) for k in range(1, POLISH_ROUNDS + 1)]
                          if polish else [])
        for k, tol_k in enumerate(rounds):
            label = spec.name if k == 0 else f"{spec.name} (polish, tol {tol_k:g})"
            t0 = time.perf_counter()
            seen.clear()
            opts = {**spec.settings(tol_k, time_limit), **solver_options}
            try:
                out = runner.run(spec, opts, verbose, warm=k > 0 or runner.start is not None)
            except SOLVER_FAULTS as exc:
                attempts.append(Attempt(label, f"error: {str(exc).splitlines()[0][:200]}",
                                        seconds=time.perf_counter() - t0))
                break
            wall = time.perf_counter() - t0
            late = time_limit is not None and wall > time_limit
            late_note = f"; took {wall:.3g}s, over the time limit of {time_limit:g}s" if late else ""
            status = out.status
            if status in ("infeasible", "infeasible_inaccurate"):
                found = direct.elastic(task)
                if found:
                    attempts.append(Attempt(label, f"{status}; confirmed by the elastic relaxation", seconds=wall))
                    verdict, conflicts = "infeasible", found
                    break
                attempts.append(Attempt(label, f"{status}, but the requirements can all hold: "
                                        f"the solver's claim is rejected{late_note}", seconds=wall))
                break
            if status in ("unbounded", "unbounded_inaccurate"):
                attempts.append(Attempt(label, status + late_note, seconds=wall))
                if sum(a.outcome.startswith("unbounded") for a in attempts) >= 2 or spec is chain[-1]:
                    verdict = "unbounded"
                break
            theta = out.theta
            if theta is None or not np.all(np.isfinite(theta)):
                attempts.append(Attempt(label, f"{status}; no usable point returned{late_note}", seconds=wall))
                break
            t1 = time.perf_counter()
            if "theta" in seen and np.array_equal(seen["theta"], theta):
                cert, cert_s = seen["cert"], seen["seconds"]
                wall -= cert_s
            else:
                cert = check(theta, out.u, out.multipliers)
                cert_s = time.perf_counter() - t1 + seen.get("seconds", 0.0)
            ok = cert.passes(gap_tol, feas_tol)
            label = out.solved_by or label
            attempts.append(Attempt(label, f"{status}; certificate {'passed' if ok else 'failed'}{late_note}",
                                    cert.primal, cert.gap, wall + cert_s))
            timing = Timings(runner.build_seconds, out.compile_seconds, out.solve_seconds, cert_s)
            prices = _prices(task, out.multipliers, theta, feas_tol, gap_tol * max(1.0, abs(cert.primal)) * 1e-2)
            key = (not ok, cert.rel_violation > feas_tol, cert.rel_gap)
            if best is None or key < best[0]:
                best = (key, out.solved_by or spec.name, theta, cert, timing, prices,
                        {"iterations": out.iterations, "multipliers": out.multipliers, **out.details})
            done = ok and not late
            if ok or late:
                break
        if verdict is not None or done:
            break
    total = time.perf_counter() - t_start
    if hasattr(runner, "finish"):
        best = runner.finish(best)           # route facts known only at the end (sharded: passes)
    if T is not None:
        best = _back_to_original(original, T, best)
        task = original
    return _assemble(task, runner.name, attempts, best, verdict, conflicts, gap_tol, feas_tol, total)


def _back_to_original(task, T, best):
    """Map the best point theta' of the rewritten task back (theta = T theta') and recompute the
    objective and violations on the original data; the dual bound carries over unchanged (the
    two problems are the same problem), so any rounding in the rewrite shows in the gap."""
    if best is None:
        return None
    from dataclasses import replace
    key, name, theta_w, cert, timing, prices, extras = best
    theta = T @ theta_w
    viol = [r.violation(theta) for r in task.requirements]
    rel = max((v / r.scale() for v, r in zip(viol, task.requirements)), default=0.0)
    cert = replace(cert.rebased(objective(task, theta)), violation=max(viol, default=0.0), rel_violation=rel)
    return key, name, theta, cert, timing, prices, {**extras, "basis": "centred and scaled columns"}


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
    _, solver_name, theta, cert, timing, (prices, binding), extras = best
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
               prices, binding, pd.Series(dtype=float), timing, solver_name, route, attempts, cert, task,
               extras=extras)


def compare(task, solvers, *, tol: float, gap_tol: float, feas_tol: float) -> pd.DataFrame:
    """One row per solver: the same task, no fallback, each point certified by learnopt."""
    from learnopt.solve.solvers import lookup
    klass = prepare(task, None).problem_class     # what the planned route hands to solvers
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
