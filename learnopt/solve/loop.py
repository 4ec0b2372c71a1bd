"""Solve a task: plan the route, walk the solver chain, certify, assemble the fit.

A solver's own status is never taken as evidence: "optimal" comes only from learnopt's
certificate; "infeasible" only when learnopt's own check (learnopt.solve.conflicts) confirms that the requirements
cannot hold together; otherwise the next capable solver is tried and the attempt recorded.
"""
from __future__ import annotations

import sys
import time
from dataclasses import replace

import numpy as np
import pandas as pd

from learnopt.core import checks as params
from learnopt.core.errors import ParameterError
from learnopt.core.status import Status
from learnopt.problem.algebra import loss_argument, objective
from learnopt.problem.basis import conditioned
from learnopt.scale.cluster import ClusterSettings
from learnopt.solve.fit import Fit
from learnopt.solve.prices import degenerate, smallest_prices
from learnopt.solve.conflicts import conflicts as find_conflicts
from learnopt.solve.routes import prepare
from learnopt.solve.routes.base import SOLVER_FAULTS, Candidate, RunnerBase, Settings
from learnopt.solve.solvers import lookup
from learnopt.solve.solvers import plan as plan_solvers
from learnopt.solve.timings import Attempt, Timings
from learnopt.terms.losses import Custom
from learnopt.terms.penalties import CustomPenalty, Separable

POLISH_ROUNDS = 2      # tighter re-solves of one solver before moving down the chain
POLISH_FACTOR = 1e-3   # each polish round divides the tolerance by this much
TOL_FLOOR = 1e-13


def _prices(task, mults, theta, feas_tol, noise):
    """(prices, binding) keyed by each rule as the user wrote it (the pieces of a chained rule
    such as ``0 <= x <= 2`` summed; a piece binds when either does)."""
    smallest = (smallest_prices(task, theta, mults)
                if task.requirements and not task.sharded and degenerate(task, theta) else {})
    prices, binding = {}, {}
    for k, (r, m) in enumerate(zip(task.requirements, mults)):
        value = float(np.sum(m)) if r.sense != "norm" else float(m)
        if smallest and k in smallest:
            value = min(value, smallest[k])       # the rate relaxing the rule actually delivers
        if r.sense == "<=" or r.sense == "norm":
            value = max(value, 0.0)
        active = bool(np.min(r.slack(theta)) <= feas_tol * r.scale()) if r.sense != "==" else True
        if abs(value) <= noise or not active:   # round-off; a rule with room to spare has price 0
            value = 0.0                         # (complementary slackness; raw values: extras)
        for key in dict.fromkeys((r.source, r.text)):     # the rule as written, and its piece
            prices[key] = prices.get(key, 0.0) + value
            binding[key] = binding.get(key, False) or active
    return pd.Series(prices, dtype=float), pd.Series(binding, dtype=bool)


SNAP = (1e-4, 1e-6, 1e-9)   # |w_j| below these (relative to max(1, the largest)) may be an exact
                            # zero: kept only when the point still passes the certificate


def zero_candidates(problem) -> np.ndarray:
    """Coefficients for which zero is a special value: those an l1-type penalty acts on, and
    those a one-coefficient rule bounds at zero (``a >= 0``, ``a <= 0``)."""
    d = problem.dataset.d
    special = np.zeros(d, bool)
    for pen in problem.penalties:
        if isinstance(pen, Separable):
            special |= pen.separable(problem.features)[0] > 0
    for r in problem.requirements:
        if r.sense == "norm":
            continue
        rows = np.flatnonzero((np.count_nonzero(r.A[:, :d], axis=1) == 1) & (np.abs(r.rhs) == 0))
        for i in rows:
            special[np.flatnonzero(r.A[i, :d])] = True
    return special


def exact_zeros(problem, theta, check, gap_tol: float, feas_tol: float):
    """(theta with its round-off zeros made exact, its certificate), when that point still
    passes the certificate; None otherwise (or when nothing is near zero). Solvers return
    3e-7 where the optimality conditions put 0; a reader takes that for an effect."""
    d = problem.dataset.d
    special = zero_candidates(problem)
    if not special.any():
        return None
    w = theta[:d]
    big = max(1.0, float(np.abs(w).max(initial=0.0)))
    for tol in SNAP:
        snap = special & (np.abs(w) <= tol * big) & (w != 0)
        if not snap.any():
            continue
        new = theta.copy()
        new[:d][snap] = 0.0
        cert = check(new)
        if cert.passes(gap_tol, feas_tol):
            return new, cert
    return None


def _reproduces_rows(task, theta) -> bool:
    """Do the residuals vanish on every training row while there are at least as many free
    coefficients as rows (in memory, residual losses)? A tall fit that reproduces noise-free data
    is a good fit, not interpolation, so it is not checked (nor paid for)."""
    if task.sharded or task.loss.argument != "residual" or task.dataset.d + int(task.intercept) < task.dataset.n:
        return False
    M, q, _ = loss_argument(task)
    resid = M @ theta - q
    return bool(np.max(np.abs(resid)) <= 1e-9 * (1.0 + float(np.max(np.abs(q)))))


def bounded_below(problem) -> bool:
    """Is the objective bounded below by construction (every built-in loss and penalty is >= 0)?"""
    return not isinstance(problem.loss, Custom) and not any(isinstance(p, CustomPenalty) for p in problem.penalties)


def candidate_rank(cert, certified: bool, feas_tol: float) -> tuple:
    """How attempts are ordered (lower is better): certified points first, by objective; then
    feasible points, by objective (their gaps are reported, not compared: a small gap at a
    higher objective is the worse answer); then infeasible points, by relative violation."""
    infeasible = cert.rel_violation > feas_tol
    return (not certified, infeasible, cert.rel_violation if infeasible else cert.primal)


PROGRESS_AFTER = 2.0   # seconds a fit runs before it shows progress lines


class Progress:
    """A line per certificate check and per solver attempt on stderr, once a fit has run for
    ``after`` seconds (a quick fit prints nothing): route, attempt, round, current gap. On when
    asked, or (``enabled=None``) when stderr is a terminal."""

    def __init__(self, enabled: bool | None):
        self.on = bool(sys.stderr.isatty()) if enabled is None else bool(enabled)
        self.after, self.start, self.rounds = PROGRESS_AFTER, time.perf_counter(), 0

    def line(self, text: str) -> None:
        elapsed = time.perf_counter() - self.start
        if self.on and elapsed >= self.after:
            print(f"learnopt {elapsed:7.1f}s  {text}", file=sys.stderr, flush=True)


def solve_task(task, settings: Settings, *, solver: str | None = None, route: str | None = None,
               runner: RunnerBase | None = None, cluster: ClusterSettings | None = None,
               progress: bool | None = False) -> Fit:
    """Solve and certify ``task`` (or, with ``runner``, the runner's current problem: paths).

    ``task`` is the user's task (kept as ``fit.task``); the routes and the certificate see its
    plain problem value. ``cluster`` (sharded data only) says where and how to run.
    """
    params.check("solve", tol=(settings.tol, params.OPEN_UNIT), gap_tol=(settings.gap_tol, params.OPEN_UNIT),
                 feas_tol=(settings.feas_tol, params.OPEN_UNIT))
    if settings.time_limit is not None:
        params.check("solve", time_limit=(settings.time_limit, params.POSITIVE))
    t_start = time.perf_counter()
    original, T, along_path = task, None, runner is not None
    if cluster is not None and cluster.client is not None and runner is None and not task.sharded:
        raise ParameterError("client= is for sharded data; this task's data is in memory. "
                             "Give a dask DataFrame or a file pattern to fit on a cluster.")
    ticker = Progress(progress if not task.sharded else False)   # sharded fits report by rounds
    if runner is None and task.sharded:
        runner = prepare(task.as_problem(), route, cluster=cluster or ClusterSettings())
    elif runner is None:
        work, T = conditioned(task.as_problem())     # centred and scaled columns when the data need it
        runner = prepare(work, route)
        if settings.start is not None:
            start = np.asarray(settings.start, float)
            runner.start = start if T is None else np.linalg.solve(T, start)
    problem = runner.task
    gap_tol, feas_tol, tol, time_limit = settings.gap_tol, settings.feas_tol, settings.tol, settings.time_limit
    chain = plan_solvers(runner.problem_class, solver, fallback=settings.fallback, prefer=runner.prefer)
    attempts: list[Attempt] = []
    best: Candidate | None = None
    verdict = None       # "infeasible" / "unbounded" once confirmed
    conflicts = {}
    done = False         # a point certified within the time limit
    seen = {}            # the last certificate an iterative route asked for, to reuse it

    def check(theta, u, mults):
        return runner.certify(theta, u, mults, enough=1e-3 * gap_tol)

    def goal(theta, u, mults):
        t = time.perf_counter()
        cert = check(theta, u, mults)
        seen.update(theta=theta.copy(), cert=cert, seconds=seen.get("seconds", 0.0) + time.perf_counter() - t)
        runner.last_certificate = cert       # for routes that report progress
        ticker.rounds += 1
        ticker.line(f"{runner.name} route, check {ticker.rounds}: relative gap {cert.rel_gap:.3g}, "
                    f"relative violation {cert.rel_violation:.3g}")
        return cert.passes(gap_tol, feas_tol)

    def price(mults, theta, cert):
        # multipliers below 1% of the gap tolerance are a non-binding rule's round-off
        return _prices(problem, mults, theta, feas_tol, gap_tol * max(1.0, abs(cert.primal)) * 1e-2)

    runner.configure(settings, goal)
    if runner.start is not None and runner.start_multipliers is not None:
        t0 = time.perf_counter()
        start, mults = np.asarray(runner.start, float), runner.start_multipliers
        cert = check(start, runner.start_dual, mults)
        if cert.passes(gap_tol, feas_tol):
            wall = time.perf_counter() - t0
            attempts.append(Attempt("start", "the given start point; certificate passed", cert.primal, cert.gap, wall))
            prices, binding = price(mults, start, cert)
            best = Candidate(rank=candidate_rank(cert, True, feas_tol), solver="none (start point certified)",
                             theta=start, certificate=cert, timings=Timings(runner.build_seconds, 0.0, 0.0, wall),
                             prices=prices, binding=binding, extras={"iterations": 0, "multipliers": mults})
            done = True
    for spec in ([] if done else chain):
        rounds = [tol] + ([max(tol * POLISH_FACTOR ** k, TOL_FLOOR) for k in range(1, POLISH_ROUNDS + 1)]
                          if settings.polish else [])
        for k, tol_k in enumerate(rounds):
            label = spec.name if k == 0 else f"{spec.name} (polish, tol {tol_k:g})"
            t0 = time.perf_counter()
            seen.clear()
            opts = {**spec.settings(tol_k, time_limit), **settings.solver_options}
            try:
                warm = k > 0 or (runner.start is not None and not runner.cold)
                runner.cold = False
                out = runner.run(spec, opts, settings.verbose, warm=warm)
            except TypeError as exc:       # an option of the wrong type; without options it is a fault of ours
                if not settings.solver_options:
                    raise
                raise params.refusal("solve", "solver_options", settings.solver_options,
                                     f"options {spec.name} accepts, each of the type it expects "
                                     f"({str(exc).splitlines()[0][:200]})") from None
            except SOLVER_FAULTS as exc:
                attempts.append(Attempt(label, f"error: {str(exc).splitlines()[0][:200]}",
                                        seconds=time.perf_counter() - t0))
                break
            wall = time.perf_counter() - t0
            late = time_limit is not None and wall > time_limit
            late_note = f"; took {wall:.3g}s, over the time limit of {time_limit:g}s" if late else ""
            status = out.status
            if status in ("infeasible", "infeasible_inaccurate"):
                found = find_conflicts(problem)
                if found:
                    attempts.append(Attempt(label, f"{status}; confirmed: the rules cannot all hold", seconds=wall))
                    verdict, conflicts = Status.INFEASIBLE, found
                    break
                attempts.append(Attempt(label, f"{status}, but the requirements can all hold: "
                                        f"the solver's claim is rejected{late_note}", seconds=wall))
                break
            if status in ("unbounded", "unbounded_inaccurate") and bounded_below(problem):
                attempts.append(Attempt(label, f"{status}, but every loss and penalty is >= 0, so the objective "
                                        f"is bounded below: the solver's claim is rejected{late_note}", seconds=wall))
                break
            if status in ("unbounded", "unbounded_inaccurate"):
                attempts.append(Attempt(label, status + late_note, seconds=wall))
                if sum(a.outcome.startswith("unbounded") for a in attempts) >= 2 or spec is chain[-1]:
                    verdict = Status.UNBOUNDED
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
            raw = None
            if ok and runner.name != "sharded" and "refined" not in out.details:   # refined: exact already
                snapped = exact_zeros(problem, theta, lambda th: check(th, out.u, out.multipliers), gap_tol, feas_tol)
                if snapped is not None:
                    raw, (theta, cert) = theta, snapped
            label = out.solved_by or label
            attempts.append(Attempt(label, f"{status}; certificate {'passed' if ok else 'failed'}{late_note}",
                                    cert.primal, cert.gap, wall + cert_s))
            ticker.line(f"{runner.name} route, {label}: {attempts[-1].outcome}, relative gap {cert.rel_gap:.3g}")
            rank = candidate_rank(cert, ok, feas_tol)
            if best is None or rank < best.rank:       # prices only for the point that may be kept
                prices, binding = price(out.multipliers, theta, cert)
                best = Candidate(rank=rank, solver=out.solved_by or spec.name, theta=theta, certificate=cert,
                                 timings=Timings(runner.build_seconds, out.compile_seconds, out.solve_seconds, cert_s),
                                 prices=prices, binding=binding,
                                 extras={"iterations": out.iterations, "multipliers": out.multipliers, **out.details,
                                         **({"raw_theta": raw} if raw is not None else {})})
            done = ok and not late
            if ok or late:
                break
        if verdict is not None or done:
            break
    total = time.perf_counter() - t_start
    best = runner.finish(best)               # route facts known only at the end (sharded: passes)
    if T is not None:
        best = _back_to_original(original, T, best)
    # a fit names the user's task; along a path, the problem at this point's strength
    return _assemble(problem if along_path else original, runner.name, attempts, best, verdict, conflicts, gap_tol,
                     feas_tol, total, requested=solver)


def _back_to_original(task, T, best: Candidate | None) -> Candidate | None:
    """Map the best point theta' of the rewritten problem back (theta = T theta') and recompute
    the objective and violations on the original data; the dual bound carries over unchanged
    (the two problems are the same problem), so any rounding in the rewrite shows in the gap."""
    if best is None:
        return None
    theta = T @ best.theta
    viol = [r.violation(theta) for r in task.requirements]
    rel = max((v / r.scale() for v, r in zip(viol, task.requirements)), default=0.0)
    cert = replace(best.certificate.rebased(objective(task, theta)), violation=max(viol, default=0.0),
                   rel_violation=rel)
    return replace(best, theta=theta, certificate=cert, extras={**best.extras, "basis": "centred and scaled columns"})


def _assemble(task, route, attempts, best: Candidate | None, verdict, conflicts, gap_tol, feas_tol, total,
              requested: str | None = None) -> Fit:
    names = list(task.features)
    common = dict(route=route, attempts=tuple(attempts), task=task)
    if best is None:
        if verdict == Status.INFEASIBLE:
            status, msg = verdict, ("the rules cannot all hold together; fit.conflicts names a "
                                    "conflicting set and how far each of its rules alone must move")
        elif verdict == Status.UNBOUNDED:
            status, msg = verdict, ("the objective can decrease without limit; add a penalty or "
                                    "bounds on the coefficients")
        else:
            status, msg = Status.FAILED, ("no solver returned a usable point: " +
                                          "; ".join(f"{a.solver}: {a.outcome}" for a in attempts))
        return Fit(status=status, message=msg, objective=np.nan, gap=np.nan, rel_gap=np.nan, violation=np.nan,
                   coef=pd.Series(np.full(len(names), np.nan), index=names, name="coef"), intercept=np.nan,
                   prices=pd.Series(dtype=float), binding=pd.Series(dtype=bool),
                   conflicts=pd.Series(conflicts, dtype=float), timings=Timings(total=total), solver=None,
                   certificate=None, **common)
    cert, theta = best.certificate, best.theta
    if cert.passes(gap_tol, feas_tol):
        status, msg = Status.OPTIMAL, (f"certified: relative gap {cert.rel_gap:.2g} <= {gap_tol:g}, "
                                       f"worst relative violation {cert.rel_violation:.2g} <= {feas_tol:g}")
    else:
        why = []
        if not np.isfinite(cert.gap) or cert.rel_gap > gap_tol:
            why.append(f"relative gap {cert.rel_gap:.3g} > {gap_tol:g}" + (f" ({cert.note})" if cert.note else ""))
        if cert.rel_violation > feas_tol:
            why.append(f"a requirement is violated by {cert.rel_violation:.3g} (relative) > {feas_tol:g}")
        status, msg = Status.UNVERIFIED, ("the certificate does not confirm optimality: " + "; ".join(why)
                                          + ". Try a tighter tol or another solver.")
    if _reproduces_rows(task, theta):
        msg += (" The fit reproduces every training row exactly: with as many free coefficients as rows "
                "(see task.check() for identifier-like or proportional columns) it interpolates the data "
                "rather than modelling it.")
    if requested is not None and not str(best.solver).startswith(lookup(requested).name):
        asked = [a for a in attempts if a.solver.startswith(lookup(requested).name)]
        why = f": {asked[-1].outcome}" if asked else ""
        msg += f" The answer comes from {best.solver}, not from {lookup(requested).name}, the solver asked for{why}."
    d = len(names)
    return Fit(status=status, message=msg, objective=cert.primal, gap=cert.gap, rel_gap=cert.rel_gap,
               violation=cert.violation, coef=pd.Series(theta[:d], index=names, name="coef"),
               intercept=float(theta[d]) if task.intercept else 0.0, prices=best.prices, binding=best.binding,
               conflicts=pd.Series(dtype=float), timings=replace(best.timings, total=total), solver=best.solver,
               certificate=cert, extras=best.extras, **common)


def compare(task, solvers, *, tol: float, gap_tol: float, feas_tol: float) -> pd.DataFrame:
    """One row per solver: the same task, no fallback, each point certified by learnopt."""
    klass = prepare(task.as_problem(), None).problem_class     # what the planned route hands to solvers
    rows, fits = [], {}
    for name in solvers:
        spec = lookup(name)
        why = spec.why_not(klass)
        if why:
            rows.append({"solver": spec.name, "status": "not run", "note": why})
            continue
        fit = solve_task(task, Settings(tol=tol, gap_tol=gap_tol, feas_tol=feas_tol, fallback=False), solver=spec.name)
        fits[spec.name] = fit
        rows.append({"solver": spec.name, "status": fit.status.value, "objective": fit.objective, "gap": fit.gap,
                     "violation": fit.violation, "steps": fit.extras.get("iterations"),
                     **{f"{k}_s": v for k, v in fit.timings.as_dict().items()},
                     "note": "" if fit.status == Status.OPTIMAL else fit.message})
    table = pd.DataFrame(rows).set_index("solver")
    certified = [n for n, f in fits.items() if f.status == Status.OPTIMAL]
    pool = certified or [n for n, f in fits.items() if np.all(np.isfinite(f.coef))]
    if pool:
        best = min(pool, key=lambda n: fits[n].objective)
        ref = fits[best].coef.to_numpy()
        table["max_coef_diff"] = [float(np.max(np.abs(fits[n].coef.to_numpy() - ref))) if n in fits else np.nan
                                  for n in table.index]
    return table
