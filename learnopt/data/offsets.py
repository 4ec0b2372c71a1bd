"""Offsets: a known amount added to each row's linear predictor, its coefficient fixed at 1.

``offset=`` gives it directly; ``exposure=`` gives the exposure (time at risk, policy years,
area...), whose log is the offset, so a log-link fit predicts a rate times the exposure. Either
is a column name (kept out of the features, like the weights) or one number per row. The
source is remembered as ``(kind, column)`` so predictions on new rows read the same column
(``column`` is None when the values came as an array: then new rows need them given again).
"""
from __future__ import annotations

import numpy as np
import pandas as pd

from learnopt.core.errors import DataError, ParameterError

KINDS = ("offset", "exposure")


def chosen(offset, exposure):
    """(kind, given) for the one of ``offset`` / ``exposure`` that is given, or (None, None)."""
    if offset is not None and exposure is not None:
        raise ParameterError("offset= and exposure= were both given; give one: exposure=column adds "
                             "log(exposure) to the linear predictor, offset=column adds the column itself.",
                             parameters=("offset", "exposure"))
    if exposure is not None:
        return "exposure", exposure
    return ("offset", offset) if offset is not None else (None, None)


def column_of(offset, exposure) -> str | None:
    """The column name holding the offset or exposure (None when none is named)."""
    _, given = chosen(offset, exposure)
    return given if isinstance(given, str) else None


def read_offset(frame: pd.DataFrame | None, n: int, offset, exposure):
    """(values, source): the offset per row (None without one) and ``(kind, column)``."""
    kind, given = chosen(offset, exposure)
    if kind is None:
        return None, None
    if isinstance(given, str):
        if frame is None:
            raise DataError(f"{kind}={given!r} names a column, but the data is an array; pass the "
                            f"{kind} as an array with one value per row.")
        if given not in frame.columns:
            raise DataError(f"The {kind} column {given!r} is not in the data. Columns: "
                            f"{', '.join(map(str, frame.columns))}.")
        values, label = frame[given].to_numpy(), f"The {kind} column {given!r}"
    else:
        values, label = np.asarray(given).ravel(), f"The {kind} array"
    return _checked(values, n, kind, label), (kind, given if isinstance(given, str) else None)


def _checked(values, n: int, kind: str, label: str) -> np.ndarray:
    try:
        v = np.asarray(values, dtype=float)
    except (TypeError, ValueError):
        raise DataError(f"{label} has to hold numbers; convert it first (e.g. with pd.to_numeric).") from None
    if v.shape != (n,):
        raise DataError(f"{label} has {v.size} values for {n} rows; give one per row.")
    bad = np.flatnonzero(~np.isfinite(v))
    if bad.size:
        raise DataError(f"{label} has {bad.size} missing or infinite value(s) (rows {_rows(bad)}); "
                        f"fill or drop those rows.")
    if kind == "exposure":
        bad = np.flatnonzero(v <= 0)
        if bad.size:
            raise DataError(f"{label} has {bad.size} value(s) at or below 0 (rows {_rows(bad)}); an exposure "
                            f"has to be above 0 (its log is the offset): drop those rows or correct them.")
        return np.log(v)
    return v


def new_offset(source, data, n: int, given=None) -> np.ndarray | None:
    """The offset of new rows: from the same column as in training, or ``given`` (values on the
    linear-predictor scale) when the training offset came as an array."""
    if source is None:
        return None
    kind, column = source
    if given is not None:
        return _checked(given, n, "offset", "The offset given for the new rows")
    if column is None:
        raise DataError(f"This task's {kind} was given as an array, so new rows need theirs: pass "
                        f"offset=... with one value per new row (for an exposure: np.log(exposure)).")
    if not isinstance(data, pd.DataFrame) or column not in data.columns:
        raise DataError(f"The new data has no {kind} column {column!r}; this fit adds it to every "
                        f"prediction, so give the new rows that column.")
    return _checked(data[column].to_numpy(), n, kind, f"The {kind} column {column!r} of the new data")


def _rows(index: np.ndarray) -> str:
    return ", ".join(map(str, index[:5])) + (", ..." if index.size > 5 else "")
