"""One task solved on many subsets of its rows (refits on resampled rows, one fit per group):
the task rebuilt on each subset with every rule compiled again on those rows, solved and
certified, in one process or in worker processes (joblib)."""
from __future__ import annotations

import time
from dataclasses import replace

import numpy as np

from learnopt.core.errors import LearnoptError
from learnopt.core.progress import ProgressBar
from learnopt.core.status import Status
from learnopt.data.table import take_rows
from learnopt.rules.requirements import NoRows


def on_rows(task, rows: np.ndarray, unit_weights: bool = False):
    """(the task on ``rows``, rules left out). Each rule is compiled again on those rows; a rule
    whose 'where' selects none of them is left out of this subset's task and named."""
    ds = take_rows(task.dataset, rows)
    if unit_weights:
        ds = replace(ds, weights=np.ones(len(rows)))
    sub = replace(task, dataset=ds, requirements=(), row_rules=())
    ctx = sub.context()
    reqs, absent = [], []
    for spec in task.rules:
        try:
            reqs += [replace(r, rule=spec.text) for r in spec.compile(ctx)]
        except NoRows:
            absent.append(spec.text)
    return replace(sub, requirements=tuple(reqs)), absent


def solve_each(task, row_sets, unit_weights: bool, options: dict) -> list[dict]:
    """Solve the task on each row set; plain results (picklable, for worker processes):
    status, theta (None without a point), objective, gap, rel_gap, binding, absent, message,
    rows, seconds."""
    out = []
    for rows in row_sets:
        t0 = time.perf_counter()
        try:
            sub, absent = on_rows(task, rows, unit_weights)
            fit = sub.solve(progress=False, **options)
        except LearnoptError as exc:
            out.append({"status": Status.FAILED.value, "theta": None, "objective": np.nan, "gap": np.nan,
                        "rel_gap": np.nan, "binding": {}, "absent": [], "message": str(exc), "rows": len(rows),
                        "seconds": time.perf_counter() - t0})
            continue
        out.append(outcome(fit, absent, len(rows), time.perf_counter() - t0))
    return out


def outcome(fit, absent: list, rows: int, seconds: float) -> dict:
    """A fit as plain data (what crosses back from a worker process)."""
    return {"status": fit.status.value, "theta": fit.theta if fit.status.has_point else None,
            "objective": fit.objective, "gap": fit.gap, "rel_gap": fit.rel_gap,
            "binding": dict(fit.binding.items()), "absent": absent, "message": fit.message,
            "rows": rows, "seconds": seconds}


def solve_on_rows(task, row_sets, unit_weights: bool, options: dict, jobs: int, progress, label: str,
                  each=solve_each) -> list[dict]:
    """``each`` (default :func:`solve_each`) over every row set, in order; ``jobs`` worker
    processes (1: here; -1: one per core), shared out in strides so each worker gets a mix of
    early and late sets."""
    bar = ProgressBar(len(row_sets), label, progress)
    try:
        if jobs == 1:
            out = []
            for k in range(0, len(row_sets), 10):
                out += each(task, row_sets[k:k + 10], unit_weights, options)
                bar.step(len(row_sets[k:k + 10]))
            return out
        from joblib import Parallel, delayed, effective_n_jobs
        parts = effective_n_jobs(jobs) * 4
        chunks = [row_sets[k::parts] for k in range(parts)]
        done = Parallel(n_jobs=effective_n_jobs(jobs), return_as="generator")(
            delayed(each)(task, chunk, unit_weights, options) for chunk in chunks)
        out = [None] * len(row_sets)
        for k, part in enumerate(done):          # undo the striding: set j is chunk j % parts, place j // parts
            out[k::parts] = part
            bar.step(len(part))
        return out
    finally:
        bar.close()
