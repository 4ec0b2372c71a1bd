"""Encoding: how a frame's columns become the float64 design matrix, decided once and reused
for new data (in memory and, partition by partition, for sharded data).

Text and categorical columns are one-hot encoded, one coefficient per level named
``column.level`` (``region.north``; :func:`level_name` is the one place that decides the form);
when the task has an intercept the first level (in sorted order) is the reference level and
gets no column. A name that would stand for two things (a column literally called
``region.north`` beside the level ``north`` of ``region``) is refused, never aliased.
Booleans become 0/1; numbers pass through.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Sequence

import numpy as np
import pandas as pd

from learnopt.core.errors import DataError


@dataclass(frozen=True)
class Encoding:
    """How a frame's columns become the design matrix; reused for new data."""

    columns: tuple[str, ...]                          # input columns, in order
    levels: dict[str, tuple[str, ...]]               # categorical column -> kept levels
    reference: dict[str, str]                        # categorical column -> dropped level
    names: tuple[str, ...]                           # coefficient names
    shapes: dict = field(default_factory=dict)       # shaped numeric column -> its basis (data.shaping)

    @property
    def reference_names(self) -> tuple[str, ...]:
        """Names of the reference levels (no coefficient of their own: 0 by construction)."""
        return tuple(level_name(c, v) for c, v in self.reference.items())

    @property
    def former_names(self) -> dict[str, str]:
        """Every level's name in the replaced ``column=level`` form -> its name now."""
        pairs = [(c, v) for c, kept in self.levels.items() for v in kept] + list(self.reference.items())
        return {f"{c}={v}": level_name(c, v) for c, v in pairs}


def level_name(column, level) -> str:
    """The coefficient name of one level of an encoded column: ``column.level``, e.g.
    ``region.north`` (the one place the form is decided)."""
    return f"{column}.{level}"


def finite(values: np.ndarray, what: str) -> None:
    bad = ~np.isfinite(values)
    if bad.any():
        rows = np.flatnonzero(bad)
        raise DataError(f"{what} has {bad.sum()} missing or infinite value(s) (first at row "
                        f"{rows[0]}); drop or fill those rows before fitting.")


TINY, HUGE = 1e-150, 1e150      # the sizes a column's largest value must lie between (or be 0)


def real_values(values, what: str, *, sized: bool = True) -> np.ndarray:
    """``values`` as float64, refusing what would silently lose information or precision:
    complex numbers (the imaginary part would be dropped), missing or infinite values, and a
    column whose largest value is beyond 1e150 or (not zero but) below 1e-150 in size, where
    squares overflow or underflow in double precision (``sized=False``: no size check, for row
    weights, which are normalised to sum to one)."""
    arr = np.asarray(values)
    if np.iscomplexobj(arr) or (arr.dtype == object and any(isinstance(v, complex) for v in arr.ravel()[:1000])):
        raise DataError(f"{what} holds complex numbers; learnopt fits real numbers only. Split it into two "
                        f"columns (real and imaginary parts) or use its magnitude.")
    out = arr.astype(float)
    finite(out, what)
    if not sized:
        return out
    big = float(np.max(np.abs(out), initial=0.0))
    if big > HUGE:
        raise DataError(f"{what} has values beyond 1e150 in size (largest {big:.3g}); rescale it (e.g. to "
                        f"thousands or millions) before fitting.")
    if 0.0 < big < TINY:
        raise DataError(f"{what} has no value larger than 1e-150 in size (largest {big:.3g}); squares of such "
                        f"numbers underflow in double precision. Rescale it (e.g. multiply by 1e150) before "
                        f"fitting.")
    return out


def column_type(col: pd.Series) -> str:
    if pd.api.types.is_bool_dtype(col):
        return "bool"
    if pd.api.types.is_datetime64_any_dtype(col) or pd.api.types.is_timedelta64_dtype(col):
        return "datetime"
    if pd.api.types.is_numeric_dtype(col):
        return "numeric"
    return "category"


def _levels(col: pd.Series, name: str) -> list[str]:
    if col.isna().any():
        raise DataError(f"Column {name!r} has {int(col.isna().sum())} missing value(s); fill them "
                        f"(e.g. with a level 'unknown') or drop those rows.")
    types = {type(v) for v in col.tolist()}
    if types and all(issubclass(t, (int, float, np.number)) and not issubclass(t, (bool, np.bool_)) for t in types):
        raise DataError(f"Column {name!r} holds numbers stored as objects (dtype {col.dtype}), which would make "
                        f"one category per distinct value; convert it with frame[{name!r}].astype(float), or "
                        f"to text with .astype(str) if it names categories.")
    if len(types) > 1 and str in types:
        raise DataError(f"Column {name!r} mixes text and numbers ({', '.join(sorted(t.__name__ for t in types))}); "
                        f"make it all text (a category) or all numbers.")
    return sorted({str(v) for v in col.tolist()})


def encode(frame: pd.DataFrame, columns: Sequence[str], intercept: bool,
           levels: dict[str, list] | None = None, shapes: dict | None = None) -> Encoding:
    """Decide the encoding of ``columns`` of ``frame`` (levels, names).

    ``levels``: the distinct values of text columns when ``frame`` holds only the column types
    (sharded data, where they come from a pass over the partitions). ``shapes``: numeric
    columns expanded into a basis (:mod:`learnopt.data.shaping`), named by the basis.
    """
    shapes = shapes or {}
    seen = levels or {}
    names, levels, reference = [], {}, {}
    claims = {str(c): [f"data column {c!r}"] for c in frame.columns}   # what each name stands for
    for c in columns:
        col = frame[c]
        kind = column_type(col)
        if kind == "datetime":
            raise DataError(f"Column {c!r} holds dates/times; convert it to a number (e.g. days "
                            f"since a start date) or to text categories before fitting.")
        if kind == "category":
            lv = _levels(pd.Series(seen[c], dtype=object) if c in seen else col, c)
            kept = lv[1:] if intercept and len(lv) > 1 else lv
            if intercept and len(lv) > 1:
                reference[c] = lv[0]
            levels[c] = tuple(kept)
            names.extend(level_name(c, v) for v in kept)
            for v in lv:
                claims.setdefault(level_name(c, v), []).append(f"level {v!r} of column {c!r}")
        elif c in shapes:
            names.extend(shapes[c].names)
            for n in shapes[c].names:
                claims.setdefault(n, []).append(f"a basis column of the shaped feature {c!r}")
        else:
            names.append(str(c))
    clashes = [f"the name {n!r} would stand for both {' and '.join(who)}" for n, who in claims.items()
               if len(who) > 1]
    if clashes:
        fix = ("encoded levels are named column.level; rename the column or the level (e.g. with "
               "frame.rename(columns=...)) so that each name means one thing.")
        if len(clashes) == 1:
            raise DataError(f"{clashes[0][0].upper()}{clashes[0][1:]}: {fix}")
        raise DataError(f"{len(clashes)} names would each stand for two things: {fix}", problems=clashes)
    return Encoding(tuple(columns), levels, reference, tuple(names), dict(shapes))


def design(encoding: Encoding, frame: pd.DataFrame) -> np.ndarray:
    """Apply an encoding to a frame: the float64 design matrix, columns in ``encoding.names``."""
    missing = [c for c in encoding.columns if c not in frame.columns]
    if missing:
        raise DataError(f"The data lacks the feature column(s) {missing}; it needs "
                        f"{', '.join(encoding.columns)}.")
    if len(frame) == 0:
        raise DataError("The data has no rows.")
    blocks = []
    for c in encoding.columns:
        col = frame[c]
        if c in encoding.levels:
            text = col.astype(object)
            lv = _levels(text, c)
            known = set(encoding.levels[c]) | ({encoding.reference[c]} if c in encoding.reference else set())
            unseen = [v for v in lv if v not in known]
            if unseen:
                raise DataError(f"Column {c!r} has level(s) {unseen} that the training data did not "
                                f"have; known levels: {sorted(known)}. Map them to a known level first.")
            s = text.map(str).to_numpy()
            blocks.append(np.column_stack([(s == v).astype(float) for v in encoding.levels[c]])
                          if encoding.levels[c] else np.zeros((len(frame), 0)))
        else:
            kind = column_type(col)
            if kind not in ("numeric", "bool"):
                raise DataError(f"Column {c!r} was numeric in the training data but is {col.dtype} here; "
                                f"convert it to numbers.")
            values = real_values(col.to_numpy(), f"Column {c!r}")
            blocks.append(encoding.shapes[c].columns(values) if c in encoding.shapes else values[:, None])
    return np.hstack(blocks) if blocks else np.zeros((len(frame), 0))
