"""The data gateway: every input enters here, and the choice between an in-memory table and a
sharded table is made here, once, by the input's type.

Both tables answer the same small protocol: ``names``, ``encoding``, ``labels``, ``notes``,
``n``, ``d``, ``label`` and ``sharded`` (False in memory, True on a cluster). Only the in-memory
table has rows (``X``, ``y``, ``weights``, ``frame``); the sharded one has ``source`` and
``spec`` for the scale layer.
"""
from __future__ import annotations

import os

from learnopt.core.errors import ParameterError
from learnopt.data.sharded import GLOB_CHARS, open_source, read_glob
from learnopt.data.table import open_memory, read_table


def is_sharded_source(data) -> bool:
    """A dask DataFrame, or a path with glob characters (several CSV / Parquet files)."""
    if isinstance(data, (str, os.PathLike)):
        return any(ch in os.fspath(data) for ch in GLOB_CHARS)
    mod = type(data).__module__ or ""
    return mod.startswith("dask") and hasattr(data, "to_delayed") and hasattr(data, "columns")


def from_data(data, target, *, kind: str = "regression", features=None, weights=None, intercept: bool = True,
              positive=None, offset=None, exposure=None):
    """Validate the inputs of a task: a :class:`~learnopt.data.table.Dataset` for in-memory data,
    a :class:`~learnopt.data.sharded.ShardedDataset` for a dask DataFrame or a file pattern.
    ``offset`` / ``exposure`` (in memory only): see :mod:`learnopt.data.offsets`."""
    if is_sharded_source(data):
        if offset is not None or exposure is not None:
            what = "offset" if offset is not None else "exposure"
            raise ParameterError(f"{what}={what_shown(offset if offset is not None else exposure)}: an {what} is "
                                 f"not available for sharded data yet; load the rows into a pandas DataFrame, or "
                                 f"fit without it.", parameters=(what,))
        return open_source(data, target, kind=kind, features=features, weights=weights,
                           intercept=intercept, positive=positive)
    return open_memory(data, target, kind=kind, features=features, weights=weights, intercept=intercept,
                       positive=positive, offset=offset, exposure=exposure)


def what_shown(value) -> str:
    return repr(value) if isinstance(value, str) else "<array>"


def read_source(path):
    """A table from a path: a lazy dask DataFrame for a file pattern, else a pandas DataFrame."""
    return read_glob(path) if is_sharded_source(path) else read_table(path)
