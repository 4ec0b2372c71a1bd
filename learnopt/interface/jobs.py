"""Running a recipe: check where the outputs go, build the task, do the action, write the
outputs (each atomically, stamped with the run's identifier) and then the run record."""
from __future__ import annotations

import json
from contextlib import contextmanager
import uuid
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from learnopt.core.status import Status
from learnopt.core.errors import DataError
from learnopt.core.files import write_atomic
from learnopt.interface.report import html
from learnopt.interface.output_set import Planned, plan, record
from learnopt.interface.placing import csv_chunks, write_centres
from learnopt.interface.recipes import Recipe, _frame, build_task, read_from
from learnopt.interface.classes_task import ClassesTask


@dataclass
class Job:
    """What a recipe run produced."""

    recipe: Recipe
    task: object
    fit: object = None
    compare: pd.DataFrame | None = None
    path: object = None
    evaluation: object = None
    by_group: object = None             # one fit per group (action by_group)
    bootstrap: object = None            # refits on resampled rows (uncertainty.refits)
    intervals: object = None            # prediction intervals calibrated on half the held-out rows
    coverage: dict | None = None        # ... and their coverage measured on the other half
    written: list[str] = field(default_factory=list)
    rows_in_file: int | None = None     # rows in the data file(s); None when not counted (sharded)
    held_out: object = None             # the held-out rows (a DataFrame, or a lazy one), or None
    run_id: str = field(default_factory=lambda: uuid.uuid4().hex)   # stamped on every output
    planned: list[Planned] = field(default_factory=list)            # where the outputs go (checked)
    record: str | None = None           # the run record written last, or None when nothing was written

    @property
    def rows_used(self) -> int | None:
        """Rows the fit was computed on (the training rows)."""
        if self.centres:
            return None if self.task.source is not None else len(self.task.X)
        return int(self.task.dataset.n)

    @property
    def centres(self) -> bool:
        return self.recipe.task.kind == "centres"

    @property
    def ok(self) -> bool:
        if self.fit is None:
            return False
        return self.fit.ok if self.centres else self.fit.status == Status.OPTIMAL


def _split(recipe: Recipe, frame):
    hold = recipe.do.holdout
    if hold is None:
        return frame, None
    if not isinstance(frame, pd.DataFrame) and hold.path is None:
        raise DataError("do.holdout.fraction: a random held-out split of sharded data is not available; "
                        "give do.holdout.path (a held-out file) instead.")
    if hold.path is not None:
        return frame, read_from(recipe, hold.path, "do.holdout.path")
    rng = np.random.default_rng(hold.seed)
    test = rng.random(len(frame)) < hold.fraction
    if not test.any() or test.all():
        left = "no rows to hold out" if not test.any() else "no rows to train on"
        raise DataError(f"do.holdout.fraction = {hold.fraction:g} leaves {left} of the {len(frame)} rows "
                        f"(seed {hold.seed}); choose a fraction such as 0.2, or give do.holdout.path.")
    return frame.loc[~test], frame.loc[test]


def training_task(recipe: Recipe):
    """The task ``run`` solves: built on the training rows (the held-out rows set aside), and a
    note saying how the rows were split."""
    frame = _frame(recipe)
    train, held = _split(recipe, frame)
    task = build_task(recipe, train)
    if isinstance(task, ClassesTask):
        classes_refusals(recipe, task)
    if held is None:
        return task, None
    hold = recipe.do.holdout
    how = (f"held-out file {hold.path!r}" if hold.path is not None
           else f"a random {hold.fraction:g} of the rows held out (seed {hold.seed})")
    n = len(train) if isinstance(train, pd.DataFrame) else "all"
    return task, f"{how}; checked on the {n} training rows that run fits"


def run(recipe: Recipe, *, action: str | None = None, solvers=None, grid=None, n=None,
        report: str | None = None, anywhere: bool = False) -> Job:
    """Do what the recipe says (``action``/``solvers``/``grid``/``n``/``report`` override it).
    The outputs are checked before anything is read or solved (see ``output_set.plan``;
    ``anywhere`` lets the recipe's outputs leave its folder)."""
    planned = plan(recipe, report=report, anywhere=anywhere)
    frame = _frame(recipe)
    train, held = _split(recipe, frame)
    task = build_task(recipe, train)
    job = Job(recipe, task, held_out=held, rows_in_file=len(frame) if isinstance(frame, pd.DataFrame) else None,
              planned=planned)
    if job.rows_in_file is None and not job.centres:
        job.rows_in_file = job.rows_used      # sharded: a held-out split is always a file of its own
    s = recipe.solve
    if job.centres:
        job.fit = task.solve(restarts=s.restarts, seed=s.seed, client=s.cluster)
        if held is not None:
            job.evaluation = job.fit.evaluate(*_held_points(recipe, held))
        write_centres(job, frame, job.written)
        _report(job, report)
        return job
    opts = dict(tol=s.tol, gap_tol=s.gap_tol, feas_tol=s.feas_tol)
    action = action or recipe.do.action
    if isinstance(task, ClassesTask):
        return _run_classes(job, frame, held, action, report, opts)
    if action == "compare":
        job.compare = task.compare(list(solvers or recipe.do.solvers), **opts)
    if action == "by_group":
        job.by_group = task.fit_by(recipe.do.by, tol=s.tol, gap_tol=s.gap_tol, feas_tol=s.feas_tol)
    if action == "path":
        job.path = task.path(recipe.do.penalty if task.penalties else None,
                             grid=grid if grid is not None else recipe.do.grid, n=n or recipe.do.n,
                             route=s.route, solver=s.solver, progress=None, **opts)
    extra = {"client": s.cluster} if task.sharded else {}
    job.fit = task.solve(s.solver, route=s.route, time_limit=s.time_limit, polish=s.polish, **extra, **opts)
    if held is not None and job.fit.status.has_point:
        with keyed("do.holdout.groups"):
            job.evaluation = job.fit.evaluate(held, groups=recipe.do.holdout.groups)
    _uncertainty(job, held)
    _outputs(job, frame, report)
    return job


def classes_refusals(recipe: Recipe, task, action: str | None = None) -> None:
    """Refuse, before anything is solved, what a task with several classes does not take yet."""
    s, u = recipe.solve, recipe.uncertainty
    action = action or recipe.do.action
    missing = [what for what, asked in (
        (f"do.action = {action!r} (only \"solve\")", action != "solve"),
        ("do.holdout.groups", recipe.do.holdout is not None and recipe.do.holdout.groups is not None),
        ("uncertainty.refits / uncertainty.intervals", bool(u.refits or u.intervals)),
        (f"solve.route = {s.route!r} (only \"newton\" or \"direct\")", s.route not in (None, "newton", "direct")),
    ) if asked]
    if missing:
        raise DataError(f"The target {recipe.task.target!r} has {len(task.labels)} classes; a task with several "
                        f"classes does not take {'; '.join(missing)} yet. Remove "
                        f"{'it' if len(missing) == 1 else 'them'} from the recipe.", problems=missing)


def _run_classes(job: Job, frame, held, action: str, report: str | None, opts: dict) -> Job:
    """A task with several classes: solve, check on the held-out rows, write the outputs."""
    recipe, s, out = job.recipe, job.recipe.solve, job.recipe.outputs
    classes_refusals(recipe, job.task, action)
    job.fit = job.task.solve(s.solver, route=s.route, time_limit=s.time_limit, **opts)
    if held is not None and job.fit.status.has_point:
        job.evaluation = job.fit.evaluate(held)
    if out.fit:
        path = recipe.resolve(out.fit)
        job.fit.save(path, run=job.run_id)
        job.written.append(path)
    if out.coefficients:
        path = recipe.resolve(out.coefficients)
        write_atomic(path, job.fit.coefficients().to_csv(index_label="name"))
        job.written.append(path)
    if out.predictions and job.fit.status.has_point:
        path = recipe.resolve(out.predictions)
        pred = pd.DataFrame({"prediction": job.fit.predict(frame)})
        if job.task.loss.probabilities:
            chances = job.fit.probability(frame)
            for label in chances.columns:
                pred[f"probability {label}"] = chances[label].to_numpy()
        write_atomic(path, pred.to_csv(index_label="row"))
        job.written.append(path)
    _report(job, report)
    return job


@contextmanager
def keyed(key: str):
    """A data mistake found while running names the recipe key it came from."""
    try:
        yield
    except DataError as exc:
        raise DataError(f"{key}: {exc}", problems=getattr(exc, "problems", None)) from None


def _uncertainty(job: Job, held) -> None:
    """Refits on resampled rows, and prediction intervals: calibrated on a seeded half of the
    held-out rows, their coverage measured on the other half."""
    u, fit = job.recipe.uncertainty, job.fit
    if not fit.status.has_point:
        return
    if u.refits:
        with keyed("uncertainty.draw_groups"):
            job.bootstrap = fit.bootstrap(u.refits, seed=u.seed, level=u.level, groups=u.draw_groups,
                                          progress=None)
    if u.intervals and held is not None:
        if not isinstance(held, pd.DataFrame):
            raise DataError("uncertainty.intervals: the held-out rows are sharded; prediction intervals need them "
                            "in memory (a held-out file that fits in memory).")
        half = np.random.default_rng(u.seed).permutation(len(held)) < len(held) // 2
        job.intervals = fit.intervals(held[half], level=u.level)
        job.coverage = job.intervals.coverage(held[~half])


def uncertainty_dict(job: Job) -> dict:
    """The refits' and the prediction intervals' findings as plain data (JSON)."""
    out = {}
    if job.bootstrap is not None:
        out["refits"] = job.bootstrap.to_dict()
    if job.intervals is not None:
        out["prediction_intervals"] = {**job.intervals.to_dict(), "coverage_on_other_held_out_rows": job.coverage}
    return out


def _outputs(job: Job, frame, report: str | None) -> None:
    out, fit, recipe = job.recipe.outputs, job.fit, job.recipe
    if out.fit:
        path = recipe.resolve(out.fit)
        fit.save(path, run=job.run_id)
        job.written.append(path)
    if out.coefficients:
        path = recipe.resolve(out.coefficients)
        write_atomic(path, fit.coefficients().to_csv(index_label="name"))
        job.written.append(path)
    if out.predictions and fit.status.has_point:
        path = recipe.resolve(out.predictions)
        if isinstance(frame, pd.DataFrame):
            pred = pd.DataFrame({"prediction": fit.predict(frame)})
            write_atomic(path, pred.to_csv(index_label="row"))
        else:          # sharded: partition by partition, rows numbered across partitions
            write_atomic(path, csv_chunks(fit.predict(frame), "prediction"))
        job.written.append(path)
    if out.uncertainty and (job.bootstrap is not None or job.intervals is not None):
        path = recipe.resolve(out.uncertainty)
        write_atomic(path, json.dumps({"run": job.run_id, **uncertainty_dict(job)}, indent=2, default=str))
        job.written.append(path)
    if out.groups and job.by_group is not None:
        path = recipe.resolve(out.groups)
        write_atomic(path, job.by_group.table.to_csv())
        job.written.append(path)
    if out.path and job.path is not None:
        path = recipe.resolve(out.path)
        write_atomic(path, job.path.table.to_csv(index=False))
        job.written.append(path)
    if out.compare and job.compare is not None:
        path = recipe.resolve(out.compare)
        write_atomic(path, job.compare.to_csv())
        job.written.append(path)
    _report(job, report)


def _report(job: Job, report: str | None) -> None:
    out, recipe = job.recipe.outputs, job.recipe
    target = report or (recipe.resolve(out.report) if out.report else None)
    if target:
        write_atomic(target, html(job))
        job.written.append(target)
    job.record = record(job.run_id, recipe, job.planned, job.written)


def _held_points(recipe: Recipe, held):
    """Held-out points and their weights (the recipe's weights column, when it has one)."""
    w = recipe.task.weights
    if w is not None and w not in held.columns:
        raise DataError(f"The held-out data has no weights column {w!r}.")
    return held, (held[w].to_numpy(dtype=float) if w is not None else None)
