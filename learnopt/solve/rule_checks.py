"""The task's rules checked on new rows, at the fit's point.

Rules on predictions hold on the training rows by construction; nothing makes them hold on other
rows. :func:`rules_on_new_rows` compiles every rule of the task again, against the new rows
(encoded with the training encoding; ``where`` conditions read the new rows' own columns), and
measures each one at the fit's point theta:

* a rule **row by row** (``prediction >= 0``, ``prediction <= 2 * cost where region == 'north'``):
  how many new rows it selects, how many break it, the worst and the mean amount over the rows
  that break it, in the rule's own units (for ``a <= b``: a - b; for ``a == b``: |a - b|);
* a rule **over rows** (``mean``, ``sum`` or a norm of predictions over a group of rows, such as
  ``mean(prediction where g == 'a') == mean(prediction where g == 'b')``): its two sides on the new
  rows, as ``difference`` (for ``==`` rules the left side minus the right side, i.e. the gap
  between the groups on the new rows; for ``<=`` and ``>=`` rules how far past its limit the rule
  is, negative when it has room), and the amount it breaks by;
* a rule on **coefficients only** (``price >= 0``): no data enter it, so it holds on any rows
  exactly as it holds at the fit; it is listed with kind "coefficients only" and its amount at
  the fit's point.

A row breaks a rule when it misses by more than ``TOLERANCE * (1 + |limit|)`` (the tolerance a
fit itself is held to by default). A rule whose ``where`` selects none of the new rows has 0 rows
(not an error). Rules that cannot be read on the new rows (a column they name is missing; a
``where`` on array data, which has no column names) are listed with the reason in ``note``;
array data otherwise work: rules on predictions without ``where`` are checked on them.

The kind of a rule is read from what the rule compiler makes of it, not from its text: a rule that
compiles without any data is on coefficients only; a requirement with one row per selected row
doubles its rows when every new row is given twice, which tells it from a scalar one.
"""
from __future__ import annotations

import warnings

import numpy as np
import pandas as pd
import scipy.sparse as sp

from learnopt.core.errors import DataError, OldSpellingWarning
from learnopt.data.table import design_with_ones, new_design
from learnopt.rules.requirements import Context, NoRows, Requirement

TOLERANCE = 1e-6
ROW_BY_ROW, OVER_ROWS, COEFFICIENTS = "row by row", "over rows", "coefficients only"
COLUMNS = ["kind", "rows", "broken", "share_broken", "worst", "mean_break", "difference", "note"]


def new_context(task, data) -> Context:
    """What rules compile against on new rows: the task's names, the new rows' design (with the
    column of ones when the task has an intercept) and, for a DataFrame, its columns."""
    ds = task.dataset
    enc = ds.encoding
    reference, former = (enc.reference_names, enc.former_names) if enc is not None else ((), {})
    X = design_with_ones(new_design(ds, data), task.intercept)
    frame = data.reset_index(drop=True) if isinstance(data, pd.DataFrame) else None
    return Context(task.coefficient_names, X, frame, reference, former,
                   no_rows="" if frame is not None else
                   "its 'where' condition needs column names; give the new rows as a DataFrame.")


def _doubled(ctx: Context) -> Context:
    """The same context with every row given twice (tells row-by-row requirements from scalars)."""
    X = ctx.design
    design = sp.vstack([X, X], format="csr") if sp.issparse(X) else np.vstack([X, X])
    frame = None if ctx.frame is None else pd.concat([ctx.frame, ctx.frame], ignore_index=True)
    return Context(ctx.names, design, frame, ctx.reference, ctx.former, ctx.no_rows)


def _compiled(spec, ctx: Context) -> list[Requirement]:
    with warnings.catch_warnings():      # old spellings were pointed out when the rule was given
        warnings.simplefilter("ignore", OldSpellingWarning)
        return spec.compile(ctx)


def _without_data(spec, ctx: Context) -> list[Requirement] | None:
    """The rule compiled with no data at all; None when it needs data (predictions or columns)."""
    bare = Context(ctx.names, None, None, ctx.reference, ctx.former, no_rows="no data")
    try:
        return _compiled(spec, bare)
    except DataError:
        return None


def _difference(r: Requirement, theta: np.ndarray) -> np.ndarray:
    """Per row: how far past its limit the requirement is (the left side minus the right for ==)."""
    if r.sense == "norm":
        return np.array([np.linalg.norm(r.A @ theta + r.rhs, r.order) + r.f @ theta - r.bound])
    return np.asarray(r.A @ theta - r.rhs, dtype=float).ravel()


def _amount(r: Requirement, d: np.ndarray) -> np.ndarray:
    return np.abs(d) if r.sense == "==" else np.maximum(d, 0.0)


def _limit(r: Requirement) -> np.ndarray:
    return np.array([abs(r.bound)]) if r.sense == "norm" else np.abs(np.asarray(r.rhs, dtype=float)).ravel()


def _largest(r: Requirement, d: np.ndarray) -> float:
    """The row of a scalar requirement furthest past its limit (== rules: furthest from it, signed)."""
    if not d.size:
        return 0.0
    return float(d[np.argmax(np.abs(d))] if r.sense == "==" else d.max())


def _row(kind, rows=np.nan, broken=np.nan, worst=0.0, mean_break=np.nan, difference=np.nan, note="") -> dict:
    share = broken / rows if rows == rows and broken == broken and rows > 0 else np.nan
    return dict(kind=kind, rows=rows, broken=broken, share_broken=share, worst=worst, mean_break=mean_break,
                difference=difference, note=note)


def _row_by_row(reqs: list[Requirement], theta: np.ndarray) -> dict:
    """One row-by-row rule (its pieces, when chained, measured on the same rows)."""
    amounts, over = [], []
    for r in reqs:
        a = _amount(r, _difference(r, theta))
        amounts.append(a)
        over.append(a > TOLERANCE * (1.0 + _limit(r)))
    if len({len(a) for a in amounts}) == 1:          # pieces of one rule select the same rows
        amount, broken = np.max(amounts, axis=0), np.any(over, axis=0)
    else:
        amount, broken = np.concatenate(amounts), np.concatenate(over)
    n_broken = int(broken.sum())
    return _row(ROW_BY_ROW, rows=len(amount), broken=n_broken,
                worst=float(amount[broken].max()) if n_broken else 0.0,
                mean_break=float(amount[broken].mean()) if n_broken else np.nan)


def _scalar(reqs: list[Requirement], theta: np.ndarray, kind: str) -> dict:
    """A rule over rows or on coefficients: its difference and the amount it breaks by."""
    diffs = [_largest(r, _difference(r, theta)) for r in reqs]
    amounts = [float(_amount(r, np.array([d]))[0]) for r, d in zip(reqs, diffs)]
    limits = [float(_limit(r).max()) if _limit(r).size else 0.0 for r in reqs]
    broken = any(a > TOLERANCE * (1.0 + lim) for a, lim in zip(amounts, limits))
    pick = int(np.argmax([abs(d) if r.sense == "==" else d for r, d in zip(reqs, diffs)]))
    return _row(kind, worst=max(amounts) if broken else 0.0, difference=diffs[pick],
                note="" if not broken else "breaks on the new rows")


def _one(spec, ctx: Context, theta: np.ndarray) -> dict:
    bare = _without_data(spec, ctx)
    if bare is not None:
        return _scalar(bare, theta, COEFFICIENTS) | {"note": "holds on any rows as at the fit (no data enter it)"}
    try:
        reqs = _compiled(spec, ctx)
    except NoRows:
        return _row(ROW_BY_ROW, rows=0, broken=0, note="its 'where' selects none of the new rows")
    except DataError as exc:
        return _row("not checked", note=str(exc))
    one_row = [i for i, r in enumerate(reqs) if r.sense != "norm" and r.rows == 1]
    twice = _compiled(spec, _doubled(ctx)) if one_row else reqs
    by_row = [r for i, r in enumerate(reqs) if r.sense != "norm" and (r.rows > 1 or twice[i].rows == 2)]
    if by_row:
        return _row_by_row(by_row, theta)
    return _scalar(reqs, theta, OVER_ROWS)


def rules_on_new_rows(fit, data) -> pd.DataFrame:
    """Every rule of ``fit.task`` measured on the rows of ``data`` at ``fit.theta``.

    Returns
    -------
    DataFrame indexed by the rule as written, columns: ``kind`` ("row by row", "over rows",
    "coefficients only", or "not checked"), ``rows`` (new rows the rule selects; row-by-row rules),
    ``broken`` (how many of them break it), ``share_broken``, ``worst`` (the largest amount a
    row, or the rule, misses by; 0 when it holds), ``mean_break`` (mean amount over the rows that
    break it), ``difference`` (rules over rows and on coefficients: see the module docstring) and
    ``note``. Empty (with these columns) when the task has no rules.
    """
    specs = list(getattr(fit.task, "rules", ()) or ())
    if not specs:
        return pd.DataFrame(columns=COLUMNS, index=pd.Index([], name="rule"))
    ctx = new_context(fit.task, data)
    theta = fit.theta
    table = pd.DataFrame([_one(spec, ctx, theta) for spec in specs], columns=COLUMNS,
                         index=pd.Index([spec.text for spec in specs], name="rule"))
    return table.astype({"rows": "Int64", "broken": "Int64"})
