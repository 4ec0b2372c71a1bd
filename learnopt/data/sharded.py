"""The sharded table: tables too large for one process, held as row blocks on a dask cluster.

A source (a dask DataFrame, or a glob of CSV / Parquet files) is opened lazily. One pass when
the task is built decides what the in-memory gateway decides from the whole table (the levels
of text columns, the two labels of a classification target, the number of rows), reading only
those columns; the rows themselves are never brought to the client. When the task is solved
every partition is encoded on a worker into a block (X_k, y_k, w_k) of float64 arrays that stays
on the cluster for the whole fit; routes send functions to the blocks and bring back only small
results (p-vectors, p x p matrices, numbers), which the client adds up in a fixed order.

The cluster: ``solve(client=...)`` takes a ``distributed.Client`` or a scheduler address; with
none, dask's current default client is used, and failing that a local cluster that learnopt
starts once per process (one single-threaded worker process per core, up to 4) and closes at
exit. A worker that dies mid-fit costs only time: its blocks are rebuilt from the source by the
scheduler and the lost tasks run again.
"""
from __future__ import annotations

import glob as _glob
import os
from dataclasses import dataclass, field
from typing import Any, ClassVar, Sequence

import numpy as np
import pandas as pd

from learnopt.core.errors import DataError, LearnoptError, MissingDependencyError
from learnopt.data.points import coordinate_columns
from learnopt.data.encoding import Encoding, column_type, design, encode, real_values
from learnopt.data.table import _close, _column, choose_features, labels_of, unique_columns


GLOB_CHARS = "*?["


def need_dask():
    try:
        import dask
        import dask.dataframe as dd
    except ImportError as exc:
        raise MissingDependencyError("Sharded data needs dask and distributed: "
                                     "pip install 'learnopt[scale]'.") from exc
    return dask, dd


def read_glob(pattern: str):
    """A lazy dask DataFrame over every file matching ``pattern`` (all CSV or all Parquet)."""
    _, dd = need_dask()
    pattern = os.fspath(pattern)
    files = sorted(_glob.glob(pattern))
    if not files:
        hint = "" if os.path.isabs(pattern) else f" (a relative pattern is read from the working folder {os.getcwd()!r})"
        raise DataError(f"No files match {pattern!r}; check the pattern{hint}.")
    kinds = {"parquet" if f.lower().endswith((".parquet", ".pq")) else
             "csv" if f.lower().endswith((".csv", ".txt", ".csv.gz")) else "other" for f in files}
    if kinds == {"parquet"}:
        return dd.read_parquet(files)
    if kinds == {"csv"}:
        return dd.read_csv(files, blocksize=None)      # one partition per file
    raise DataError(f"The files matching {pattern!r} mix types or have an unknown type "
                    f"({', '.join(sorted(kinds))}); match only .csv or only .parquet files.")


def as_frame(data):
    """(lazy dask DataFrame, label for messages) of a file pattern or a dask DataFrame."""
    if isinstance(data, (str, os.PathLike)):
        return read_glob(data), os.fspath(data)
    return data, "dask DataFrame"


def compute(label: str, *lazy):
    """dask.compute, with reading errors (which come in many types) turned into a DataError."""
    dask, _ = need_dask()
    try:
        return dask.compute(*lazy)
    except LearnoptError:
        raise
    except Exception as exc:  # noqa: BLE001 - every other failure here means "cannot read"
        raise DataError(f"The data {label!r} could not be read: {str(exc).splitlines()[0][:300]}") from None


@dataclass(frozen=True)
class BlockSpec:
    """How a worker turns one partition into a block: everything the encoding pass decided."""

    encoding: Encoding
    target: str
    weights: str | None
    kind: str
    labels: tuple | None


@dataclass(eq=False)
class ShardedDataset:
    """A task's data when it lives on a dask cluster: names and encoding here, rows there.

    Answers the tables' shared protocol (``names``, ``encoding``, ``labels``, ``notes``, ``n``,
    ``d``, ``label``, ``sharded``; see :mod:`learnopt.data.gateway`). It has no rows on the
    client: ``source`` (the lazy dask DataFrame) and ``spec`` are for the scale layer.
    """

    source: Any                           # the lazy dask DataFrame
    spec: BlockSpec
    n: int
    partitions: int
    label: str                            # what the user gave (pattern or "dask DataFrame")
    notes: list[str] = field(default_factory=list)
    sharded: ClassVar[bool] = True

    @property
    def names(self) -> tuple[str, ...]:
        return self.spec.encoding.names

    @property
    def encoding(self) -> Encoding:
        return self.spec.encoding

    @property
    def labels(self):
        return self.spec.labels

    @property
    def d(self) -> int:
        return len(self.names)


def open_source(data, target, *, kind: str, features: Sequence[str] | None, weights, intercept: bool,
                positive) -> ShardedDataset:
    """Validate a sharded source and decide its encoding in one pass over the needed columns."""
    ddf, label = as_frame(data)
    meta = ddf._meta
    if not isinstance(target, str):
        raise DataError("With sharded data (a dask DataFrame or a file pattern), 'target' must be a "
                        "column name.")
    if weights is not None and not isinstance(weights, str):
        raise DataError("With sharded data, 'weights' must be a column name.")
    unique_columns(meta.columns)
    _column(meta, target, "target")
    if weights is not None:
        col = _column(meta, weights, "weights")
        if not pd.api.types.is_numeric_dtype(col) or pd.api.types.is_bool_dtype(col):
            raise DataError(f"The weights column {weights!r} must be numeric.")
    features = choose_features(meta.columns, target, weights, features, intercept)
    if kind == "regression":
        tcol = meta[target]
        if not pd.api.types.is_numeric_dtype(tcol) or pd.api.types.is_bool_dtype(tcol):
            raise DataError(f"The target {target!r} must be numeric for regression (it is {tcol.dtype}); "
                            f"for labels use lo.classification.")
    text = [c for c in features if column_type(meta[c]) == "category"]
    wanted = text + ([target] if kind == "classification" else [])
    found = compute(label, *[ddf[c].drop_duplicates() for c in wanted], ddf.map_partitions(len))
    uniques, sizes = found[:-1], np.asarray(found[-1], dtype=np.int64)
    levels = {c: list(u) for c, u in zip(text, uniques)}
    enc = encode(meta, features, intercept, levels=levels)
    labels = labels_of(list(uniques[-1]), positive, repr(target)) if kind == "classification" else None
    n = int(sizes.sum())
    if n == 0:
        raise DataError(f"The data {label!r} has no rows.")
    spec = BlockSpec(enc, target, weights, kind, labels)
    return ShardedDataset(ddf, spec, n, ddf.npartitions, label)


def encode_block(part: pd.DataFrame, spec: BlockSpec, index: int):
    """One partition -> (X, y, w) float64 arrays, on a worker; errors name the partition."""
    part = part.reset_index(drop=True)
    d = len(spec.encoding.names)
    if len(part) == 0:
        return np.zeros((0, d)), np.zeros(0), np.zeros(0)
    try:
        X = design(spec.encoding, part)
        col = part[spec.target]
        if spec.kind == "classification":
            neg, pos = spec.labels
            values = col.to_numpy()
            unknown = sorted({str(v) for v in values if v != neg and v != pos})
            if col.isna().any() or unknown:
                raise DataError(f"The target {spec.target!r} has missing or unexpected labels {unknown[:5]}; "
                                f"the labels are {neg!r} and {pos!r}.")
            y = np.where(values == pos, 1.0, -1.0)
        else:
            y = real_values(col.to_numpy(), f"The target {spec.target!r}")
        if spec.weights is None:
            w = np.ones(len(part))
        else:
            w = part[spec.weights].to_numpy(dtype=float)
            bad = ~np.isfinite(w) | (w < 0)
            if bad.any():
                raise DataError(f"The weights column {spec.weights!r} has a negative, missing or infinite "
                                f"value (first at row {np.flatnonzero(bad)[0]}); weights must be >= 0.")
    except DataError as exc:
        raise DataError(f"Partition {index} of the data: {exc}") from None
    return X, y, w


@dataclass(eq=False)
class ShardedPoints:
    """Points for :func:`learnopt.centres.placement.centres` that live on a dask cluster."""

    source: Any
    names: tuple[str, ...]
    weights: str | None
    n: int
    positive: int                # points with positive weight
    label: str


def open_points(data, weights, features) -> ShardedPoints:
    """Validate sharded points: numeric coordinate columns, a weights column; count them."""
    ddf, label = as_frame(data)
    meta = ddf._meta
    if weights is not None and not isinstance(weights, str):
        raise DataError("centres: with sharded data, 'weights' must be a column name.")
    if weights is not None and weights not in meta.columns:
        raise DataError(f"centres: no weights column {weights!r}.{_close(weights, meta.columns)}")
    cols = coordinate_columns(meta, features, weights)
    if not cols:
        raise DataError("centres: the data has no numeric coordinate columns.")
    w = ddf[weights] if weights is not None else None
    n, positive = compute(label, ddf.map_partitions(len).sum(), (w > 0).sum() if w is not None else 0)
    n = int(n)
    if n == 0:
        raise DataError("centres: the data has no points.")
    return ShardedPoints(ddf, tuple(map(str, cols)), weights, n, int(positive) if w is not None else n, label)
