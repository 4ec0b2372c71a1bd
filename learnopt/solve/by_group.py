"""One fit per group: the same task (loss, penalties, rules) fitted on each group's rows.

Each group's task is rebuilt on its rows with every rule compiled again there (a rule whose
'where' selects none of a group's rows is left out of that group's fit and named), solved and
certified; groups run in worker processes once the fits would take a while. The result is one
table (group, status, objective, gap, rows, coefficients) and a predict that sends each new row
to its own group's coefficients.
"""
from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from learnopt.core import checks as params
from learnopt.core.errors import DataError
from learnopt.core.files import json_ready
from learnopt.core.status import CAUTION, Status
from learnopt.data.table import new_design
from learnopt.solve.loop import solve_task
from learnopt.solve.routes.base import Settings
from learnopt.solve.routes.shared import Shared, shape
from learnopt.solve.subsets import on_rows, outcome, solve_on_rows

PARALLEL_AFTER = 200     # groups before jobs=None uses every core
COMPILED: dict = {}      # this process's compiled problem, by shape (kept across calls and worker tasks)
FIT_COLUMNS = ("status", "objective", "gap", "rel_gap", "rows", "seconds")


@dataclass(frozen=True, eq=False)
class GroupFits:
    """One certified fit per group.

    Attributes
    ----------
    column : the column whose values name the groups.
    table : one row per group: status, objective, gap, rel_gap, rows, seconds, then one column
        per coefficient (NaN for a group without a point), then rules_left_out and message.
    seconds : wall time of all the fits.
    """

    column: str
    table: pd.DataFrame
    seconds: float
    task: object = field(repr=False, default=None)

    @property
    def certified(self) -> int:
        return int(np.sum(self.table["status"] == Status.OPTIMAL.value))

    def coefficients(self) -> pd.DataFrame:
        """Groups x coefficients (the intercept last when the task has one)."""
        return self.table[list(self.task.coefficient_names)]

    def predict(self, data) -> pd.Series:
        """Each row of ``data`` (a DataFrame with the group column) predicted with its own group's
        coefficients: values for regression, scores x.w + b for classification."""
        if not isinstance(data, pd.DataFrame) or self.column not in data.columns:
            raise DataError(f"predict(): the rows need the group column {self.column!r} to find their group's fit; "
                            f"give a DataFrame with it.")
        labels = data[self.column]
        unknown = sorted(set(labels.dropna().unique()) - set(self.table.index), key=str)
        if unknown or labels.isna().any():
            shown = ", ".join(map(repr, unknown[:5])) + (" ..." if len(unknown) > 5 else "")
            raise DataError(f"predict(): {'groups ' + shown if unknown else 'rows without a group'} "
                            f"{'have' if unknown else 'have'} no fit (column {self.column!r}); predict those rows "
                            f"with a pooled fit, or drop them.")
        X = new_design(self.task.dataset, data)
        coefs = self.coefficients().loc[labels.to_numpy()].to_numpy()
        d = self.task.dataset.d
        score = np.einsum("ij,ij->i", np.asarray(X.todense() if hasattr(X, "todense") else X), coefs[:, :d])
        if self.task.intercept:
            score = score + coefs[:, -1]
        return pd.Series(score, index=data.index, name="prediction")

    def to_dict(self) -> dict:
        return {"column": self.column, "groups": len(self.table), "certified": self.certified,
                "seconds": self.seconds, "fits": json_ready(self.table.to_dict(orient="index"))}

    def summary(self) -> str:
        counts = self.table["status"].value_counts().to_dict()
        return "\n".join([f"one fit per {self.column}: {len(self.table)} groups, {self.certified} certified "
                          f"({', '.join(f'{k} {v}' for k, v in counts.items())}), {self.seconds:.2f} s",
                          self.table.drop(columns=["message"]).to_string(float_format=lambda v: f"{v:.5g}"),
                          CAUTION])

    def __repr__(self) -> str:
        return f"GroupFits({len(self.table)} groups by {self.column!r}, certified={self.certified})"


def solve_groups(task, row_sets, unit_weights: bool, options: dict) -> list[dict]:
    """Each group's task, solved on one problem compiled once when the groups share its shape
    (squared loss, linear rules with as many rows in every group), else solved the usual way."""
    settings = Settings(tol=options.get("tol", 1e-9), gap_tol=options.get("gap_tol", 1e-7),
                        feas_tol=options.get("feas_tol", 1e-6))
    out = []
    for rows in row_sets:
        t0 = time.perf_counter()
        sub, absent = on_rows(task, rows, unit_weights)
        kind = shape(sub)
        if kind is not None and kind not in COMPILED:
            COMPILED.clear()                                # one shape at a time is what fit_by meets
            COMPILED[kind] = Shared(sub)
        shared = COMPILED.get(kind)
        if kind is None:
            fit = sub.solve(progress=False, **options)
        else:
            fit = solve_task(sub, settings, runner=shared.runner(sub))
            if fit.status != Status.OPTIMAL:
                fit = sub.solve(progress=False, **options)      # the usual way, with its fallbacks
        out.append(outcome(fit, absent, len(rows), time.perf_counter() - t0))
    return out


def fit_by(task, column, *, jobs: int | None = None, progress: bool | None = None, tol: float = 1e-9,
           gap_tol: float = 1e-7, feas_tol: float = 1e-6) -> GroupFits:
    """Fit ``task`` on each group's rows; see the module docstring and :class:`GroupFits`."""
    if jobs is not None and (int(jobs) != jobs or not (jobs == -1 or jobs >= 1)):
        raise params.refusal("fit_by", "jobs", jobs, "a whole number of processes, at least 1 (-1: one per core)")
    if task.sharded:
        raise DataError("fit_by(): this task's data is sharded; one fit per group needs the rows in memory. Load "
                        "the groups you need into a pandas DataFrame.")
    ds = task.dataset
    frame = ds.frame
    if frame is None or not isinstance(column, str) or column not in frame.columns:
        known = [] if frame is None else list(frame.columns)
        raise DataError(f"fit_by({column!r}): the data has no column {column!r}"
                        f"{params.nearest(str(column), known)}; name the column whose values are the groups.")
    if ds.encoding is not None and column in getattr(ds.encoding, "columns", ()):
        raise DataError(f"fit_by({column!r}): {column!r} is one of the task's features, and within one group it does "
                        f"not vary; build the task with features= leaving it out.")
    labels = frame[column]
    if labels.isna().any():
        raise DataError(f"fit_by({column!r}): {int(labels.isna().sum())} row(s) have no group; fill or drop them.")
    codes, groups = pd.factorize(labels, sort=True)
    row_sets = [np.flatnonzero(codes == g) for g in range(len(groups))]
    if jobs is None:
        jobs = -1 if len(groups) > PARALLEL_AFTER else 1
    options = dict(tol=tol, gap_tol=gap_tol, feas_tol=feas_tol)
    t0 = time.perf_counter()
    results = solve_on_rows(task, row_sets, False, options, int(jobs), progress, f"fits by {column}",
                            each=solve_groups)
    seconds = time.perf_counter() - t0
    names = list(task.coefficient_names)
    theta = np.array([r["theta"] if r["theta"] is not None else np.full(len(names), np.nan) for r in results])
    table = pd.DataFrame({c: [r[c] for r in results] for c in FIT_COLUMNS}, index=pd.Index(groups, name=column))
    table = pd.concat([table, pd.DataFrame(theta, index=table.index, columns=names)], axis=1)
    table["rules_left_out"] = ["; ".join(r["absent"]) for r in results]
    table["message"] = [r["message"] for r in results]
    return GroupFits(column=column, table=table, seconds=seconds, task=task)
