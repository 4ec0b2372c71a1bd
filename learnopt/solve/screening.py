"""Rules on predictions over many rows, solved on the rows that matter.

A rule such as ``prediction >= cost where segment == 'retail'`` is one inequality per selected
row; on millions of rows the whole program is as tall as the data, though at the answer only
the rows where the rule binds matter. :func:`solve_screened` generates them (constraint
generation, common practice in linear and quadratic programming): it solves with none of those
rows, checks every row of every such rule at the answer, adds the rows it breaks, and solves
again. The task with only some rows is a relaxation, so once its answer keeps every row it is
the answer of the whole task; learnopt's certificate then checks it against every row (the
multipliers of the rows left out are zero). A rule that binds on many rows, a point without a
certificate, or more than a few rounds fall back to solving the whole task at once.
"""
from __future__ import annotations

import time
from dataclasses import replace

import numpy as np

from learnopt.solve.globbing import solve_fast
from learnopt.solve.reduced import whole_task_fit

SCREEN_ROWS = 2000     # row rules taller than this are screened
ROUNDS = 8             # rounds of adding broken rows before solving the whole task instead
SHARE = 0.5            # ... or once the kept rows are this share of the rule's rows


def solve_screened(task, settings, *, solver=None, route=None, cluster=None, progress=None):
    """:func:`~learnopt.solve.loop.solve_task`, with tall rules on predictions screened by rows."""
    whole = dict(solver=solver, route=route, cluster=cluster, progress=progress)
    tall = [k for k, r in enumerate(task.requirements) if r.sense == "<=" and r.rows > SCREEN_ROWS]
    if task.sharded or not tall:
        return solve_fast(task, settings, **whole)
    t0 = time.perf_counter()
    keep = {k: np.zeros(0, dtype=int) for k in tall}
    for rounds in range(1, ROUNDS + 1):
        parts = [(k, replace(r, A=r.A[keep[k]], rhs=r.rhs[keep[k]]) if k in keep else r)
                 for k, r in enumerate(task.requirements)]
        parts = [(k, r) for k, r in parts if r.rows > 0]
        fit = solve_fast(replace(task, requirements=tuple(r for _, r in parts)), settings, **whole)
        if not fit.status.has_point or fit.extras.get("multipliers") is None:
            break
        theta = fit.theta
        added = False
        for k in tall:
            r = task.requirements[k]
            broken = np.flatnonzero(r.slack(theta) < -settings.feas_tol * r.scale())
            broken = np.setdiff1d(broken, keep[k], assume_unique=False)
            if broken.size:
                keep[k], added = np.union1d(keep[k], broken), True
        if not added:
            return _whole_fit(task, fit, parts, keep, settings, rounds, time.perf_counter() - t0) \
                or solve_fast(task, settings, **whole)
        if any(keep[k].size > SHARE * task.requirements[k].rows for k in tall):
            break
    return solve_fast(task, settings, **whole)


def _whole_fit(task, fit, parts, keep, settings, rounds, seconds):
    """The reduced task's answer as the whole task's fit, when the certificate on every row
    confirms it (None otherwise)."""
    reduced = fit.extras["multipliers"]
    at = {k: m for (k, _), m in zip(parts, reduced)}
    mults = []
    for k, r in enumerate(task.requirements):
        if k in keep:
            m = np.zeros(r.rows)
            if k in at:
                m[keep[k]] = np.asarray(at[k], float).ravel()
            mults.append(m)
        else:
            mults.append(at[k])
    kept = sum(int(keep[k].size) for k in keep)
    total = sum(task.requirements[k].rows for k in keep)
    how = (f"The rules on predictions were solved on the rows that matter ({kept} of {total} rows, {rounds} "
           f"round{'s' * (rounds > 1)})")
    return whole_task_fit(task, fit, mults, settings, how,
                          {"screened": {"kept": kept, "rows": total, "rounds": rounds}}, seconds)
