"""Pieces the solve layer shares: silencing a solver's own banner, solving a small auxiliary
program quietly, and the loss's subgradient interval on the rows that sit at one of its kinks."""
from __future__ import annotations

import contextlib
import os
import sys
import warnings

import cvxpy as cp
import numpy as np


@contextlib.contextmanager
def quiet(enabled: bool):
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


def solve_small(problem: cp.Problem, tol: float | None = 1e-10, *, accept_inaccurate: bool = True) -> bool:
    """Solve a small auxiliary program: HiGHS for a linear one (``tol=None``: a vertex, exact to
    round-off), else Clarabel at ``tol``. True when it reached an optimum."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        try:
            if tol is None:
                with quiet(True):                       # HiGHS prints a banner of its own
                    problem.solve(solver="HIGHS")
            else:
                problem.solve(solver="CLARABEL", tol_gap_abs=tol, tol_gap_rel=tol, tol_feas=tol)
        except cp.error.SolverError:
            return False
    ok = (cp.OPTIMAL, cp.OPTIMAL_INACCURATE) if accept_inaccurate else (cp.OPTIMAL,)
    return problem.status in ok


def kink_rows(loss, z, a, tol: float):
    """(rows, low, high): the rows with positive weight whose loss argument is within ``tol``
    (relative to max(1, max|z|)) of a kink, and the loss's subgradient interval there; None
    for a loss without kinks or when no row is at one."""
    kinks = loss.kinks()
    if kinks is None:
        return None
    size = max(1.0, float(np.abs(z).max(initial=0.0)))
    rows = np.flatnonzero(np.any([np.abs(z - k) <= tol * size for k in kinks], axis=0) & (a > 0))
    if rows.size == 0:
        return None
    h = 1e-3 * (1.0 + float(np.max(np.abs(kinks))))
    left, right = loss.gradient(z[rows] - h), loss.gradient(z[rows] + h)
    return rows, np.minimum(left, right), np.maximum(left, right)
