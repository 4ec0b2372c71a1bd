"""The data gateway: every table enters here and leaves as float64 arrays with names attached.

Accepted data: a pandas DataFrame (``target`` and ``weights`` are column names), a path to a
CSV or Parquet file, or a numpy / scipy.sparse matrix (then ``target`` is the y array and the
coefficient names are x0, x1, ...). Text and categorical columns are one-hot encoded, one
coefficient per level named ``column.level`` (:mod:`learnopt.data.encoding`); the coefficients
of a column's levels are differences from its reference level, which a rule may name (its
coefficient is 0 by construction). Anything unusable raises :class:`DataError` naming the
column and the fix.
"""
from __future__ import annotations

import ast
import csv
import gzip
import os
import re
import unicodedata
import zlib
from dataclasses import dataclass, field
from typing import Any, ClassVar, Sequence

import numpy as np
import pandas as pd
import scipy.sparse as sp

from learnopt.core.errors import DataError
from learnopt.data.encoding import Encoding, column_type, design, encode, finite, real_values
from learnopt.core.checks import nearest
from learnopt.data.offsets import column_of, read_offset


@dataclass(eq=False)
class Dataset:
    """Validated data: design X (n x d), target y, row weights, names and the raw frame."""

    X: np.ndarray | sp.csr_matrix
    y: np.ndarray
    weights: np.ndarray
    names: tuple[str, ...]
    frame: pd.DataFrame | None
    encoding: Encoding | None
    labels: tuple | None = None          # (negative, positive) for classification; every label for several classes
    notes: list[str] = field(default_factory=list)
    offset: np.ndarray | None = None               # added to each row's linear predictor
    offset_source: tuple | None = None             # (kind, column): see learnopt.data.offsets
    sharded: ClassVar[bool] = False
    label: ClassVar[str] = "in-memory data"

    @property
    def n(self) -> int:
        return self.X.shape[0]

    @property
    def d(self) -> int:
        return self.X.shape[1]


def read_table(path: str | os.PathLike) -> pd.DataFrame:
    path = os.fspath(path)
    if any(ch in path for ch in "*?["):
        raise DataError(f"{path!r} is a file pattern: patterns are read as sharded data by "
                        f"lo.regression / lo.classification / lo.centres and a recipe's data.path; "
                        f"here give one file.")
    if not os.path.exists(path):
        hint = "" if os.path.isabs(path) else f" (a relative path is read from the working folder {os.getcwd()!r})"
        raise DataError(f"Data file {path!r} does not exist; check the path{hint}.")
    if os.path.isdir(path):
        raise DataError(f"Data file {path!r} is a folder; give one CSV or Parquet file in it, or a file "
                        f"pattern such as {os.path.join(path, '*.csv')!r} for sharded data.")
    lower = path.lower()
    try:
        if lower.endswith((".parquet", ".pq")):
            return pd.read_parquet(path)
        if lower.endswith((".csv", ".txt", ".csv.gz")):
            frame = pd.read_csv(path)
    except ImportError as exc:
        raise DataError(f"Reading {path!r} needs an optional package: {exc}.") from None
    except UnicodeDecodeError:
        raise DataError(f"Data file {path!r} is not UTF-8 text; save it as UTF-8.") from None
    except (ValueError, pd.errors.ParserError, OSError, EOFError, zlib.error) as exc:
        what = "a damaged or cut-short compressed file" if lower.endswith(".gz") else "unreadable"
        raise DataError(f"Data file {path!r} could not be read ({what}: {str(exc).splitlines()[0][:200]}); "
                        f"check the file, or write it again.") from None
    else:
        if lower.endswith((".csv", ".txt", ".csv.gz")):
            header_once(path, frame)
            return frame
    raise DataError(f"Data file {path!r}: unknown file type; use .csv or .parquet.")


def header_once(path: str, frame: pd.DataFrame) -> None:
    """Refuse a CSV whose header names a column twice (the reader would rename the second
    ``a`` to ``a.1`` without a word)."""
    if not any(re.fullmatch(r".+\.\d+", str(c)) for c in frame.columns):
        return
    with (gzip.open if path.lower().endswith(".gz") else open)(path, "rt", encoding="utf-8", newline="") as fh:
        header = next(csv.reader(fh), [])
    dup = sorted({h for h in header if header.count(h) > 1})
    if dup:
        raise DataError(f"Data file {path!r} names the column(s) {', '.join(map(repr, dup))} more than once in "
                        f"its header; rename them so that each column has its own name.")


def _close(name: str, options: Sequence[str]) -> str:
    return nearest(name, options)


def _column(frame: pd.DataFrame, name, role: str) -> pd.Series:
    if not isinstance(name, str) or name not in frame.columns:
        raise DataError(f"The {role} column {name!r} is not in the data.{_close(name, frame.columns)} "
                        f"Columns: {', '.join(map(str, frame.columns))}.")
    return frame[name]


def _weights(weights, frame, n) -> tuple[np.ndarray, str | None]:
    if weights is None:
        return np.ones(n), None
    if isinstance(weights, str):
        if frame is None:
            raise DataError("weights given as a column name, but the data is an array; pass the weights as an array.")
        col = _column(frame, weights, "weights")
        if not pd.api.types.is_numeric_dtype(col) or pd.api.types.is_bool_dtype(col):
            raise DataError(f"The weights column {weights!r} must be numeric.")
        w, label = real_values(col.to_numpy(), f"Weights column {weights!r}", sized=False), f"weights column {weights!r}"
    else:
        w, label = real_values(np.asarray(weights).ravel(), "Weights", sized=False), "weights"
        if w.size != n:
            raise DataError(f"{w.size} weights given for {n} rows; give one weight per row.")
    finite(w, label.capitalize())
    if np.any(w < 0):
        raise DataError(f"{label.capitalize()} has negative values (first at row {np.flatnonzero(w < 0)[0]}); "
                        f"weights must be >= 0.")
    if w.sum() <= 0:
        raise DataError(f"{label.capitalize()} sums to zero; at least one row needs a positive weight.")
    return w, (weights if isinstance(weights, str) else None)


def _target(values: pd.Series | np.ndarray, kind: str, positive, name: str):
    if kind == "regression":
        s = pd.Series(values)
        if not pd.api.types.is_numeric_dtype(s) or pd.api.types.is_bool_dtype(s):
            raise DataError(f"The target {name} must be numeric for regression (it is {s.dtype}); "
                            f"for labels use lo.classification.")
        return real_values(s.to_numpy(), f"The target {name}"), None
    s = pd.Series(values)
    if s.isna().any():
        raise DataError(f"The target {name} has {int(s.isna().sum())} missing label(s); drop those rows.")
    if kind == "classes":                  # several classes: y holds each row's class number
        labels = sorted_labels(s.tolist(), name)
        return s.map({v: float(i) for i, v in enumerate(labels)}).to_numpy(float), labels
    neg, pos = labels_of(s.tolist(), positive, name)
    y = np.where(s.to_numpy() == pos, 1.0, -1.0)
    return y, (neg, pos)


def sorted_labels(values: list, name: str) -> tuple:
    """The distinct labels of a target, sorted; refused when missing or when two print alike."""
    if pd.Series(values, dtype=object).isna().any():
        raise DataError(f"The target {name} has missing label(s); drop those rows.")
    labels = sorted(set(values), key=lambda v: (str(type(v)), v))
    alike = sorted({str(v) for v in labels if sum(str(u) == str(v) for u in labels) > 1})
    if alike:
        raise DataError(f"The target {name} holds labels that print alike but differ in type ({', '.join(alike)}: "
                        f"{', '.join(sorted({type(v).__name__ for v in labels}))}); make them one type, e.g. "
                        f"all text with .astype(str).")
    return tuple(labels)


def labels_of(values: list, positive, name: str) -> tuple:
    """(negative, positive) labels of a binary target from its values (or distinct values)."""
    labels = list(sorted_labels(values, name))
    if len(labels) != 2:
        raise DataError(_not_two(labels, name))
    if positive is None:
        pos = labels[-1]
    elif positive in labels:
        pos = positive
    else:
        raise DataError(f"positive={positive!r} is not one of the target labels {labels}.")
    neg = labels[0] if pos == labels[1] else labels[1]
    return neg, pos


def _not_two(labels: list, name: str) -> str:
    """Why a target without exactly two labels cannot be fitted as two classes, and the way forward."""
    shown = f"{labels[:6]}{'...' if len(labels) > 6 else ''}"
    if len(labels) < 2:
        return (f"The target {name} has {len(labels)} label {shown}; a classification needs rows of two classes. "
                f"Check the rows selected (a filter may have left one class only).")
    return (f"The target {name} has {len(labels)} labels {shown}; this task fits two classes. Several classes are "
            f"fitted with loss='logistic' or loss='hinge' on data in memory; else " + one_against_rest(labels, name))


def one_against_rest(labels: list, name: str) -> str:
    """The advice to fit one class against the rest with a two-label column."""
    first = labels[0]
    column = ast.literal_eval(name) if name != "array" else "target"   # name is the column's repr
    flag = re.sub(r"\W+", "_", f"is_{first}").strip("_")
    return (f"fit one class against the rest with a two-label column, e.g. data.assign({flag}=data[{column!r}] == "
            f"{first!r}) and target={flag!r} (one task per class), or merge the labels into two classes.")


def open_memory(data, target, *, kind: str = "regression", features: Sequence[str] | None = None,
                weights=None, intercept: bool = True, positive=None, offset=None, exposure=None) -> Dataset:
    """Validate in-memory inputs of a task (a DataFrame, a CSV/Parquet path, a numpy or sparse
    matrix) and return a :class:`Dataset` (with the offset, when one is given)."""
    if isinstance(data, (str, os.PathLike)):
        data = read_table(data)
    if isinstance(data, pd.DataFrame):
        ds = _from_frame(data, target, kind, features, weights, intercept, positive, column_of(offset, exposure))
    elif isinstance(data, (np.ndarray, list)) or sp.issparse(data):
        ds = _from_array(data, target, kind, features, weights, positive)
    else:
        ds = None
    if ds is not None:
        ds.offset, ds.offset_source = read_offset(ds.frame, ds.n, offset, exposure)
        return ds
    raise DataError(f"Data of type {type(data).__name__} is not supported; give a pandas DataFrame, "
                    f"a CSV/Parquet path, or a numpy / scipy.sparse matrix.")


def _from_frame(frame, target, kind, features, weights, intercept, positive, offset_column=None) -> Dataset:
    if frame.shape[0] == 0:
        raise DataError("The data has no rows.")
    unique_columns(frame.columns)
    frame = frame.reset_index(drop=True)
    if not isinstance(target, str) and np.ndim(target) == 0 and target in frame.columns:
        raise DataError(f"target={target!r} names a column by a number; learnopt names columns "
                        f"with text: rename the columns with frame.columns = frame.columns.map(str) and give "
                        f"target={str(target)!r}.")
    if isinstance(target, str):
        ycol = _column(frame, target, "target")
        tname = repr(target)
    else:
        ycol = np.asarray(target)
        if ycol.ndim != 1 or ycol.shape[0] != len(frame):
            raise DataError(f"The target array has shape {ycol.shape}; it needs one value per row ({len(frame)}).")
        tname = "array"
    w, wcol = _weights(weights, frame, len(frame))
    features = choose_features(frame.columns, target if isinstance(target, str) else None, wcol, features, intercept,
                               offset_column)
    enc = encode(frame, features, intercept)
    X = design(enc, frame)
    y, labels = _target(ycol, kind, positive, tname)
    notes = _id_like(frame, features) + _notes(X, enc.names)
    return Dataset(X, y, w, enc.names, frame, enc, labels, notes)


RESERVED = ("intercept", "prediction")   # words the rule language and the result tables use


def unique_columns(columns) -> None:
    """Refuse duplicate column names, and names that differ only in Unicode form (a ligature
    and its letters, a full-width digit and a plain one: rules read names in their normal form,
    NFKC, so both would mean the same thing). In memory and sharded alike."""
    if columns.duplicated().any():
        dup = sorted(set(map(str, columns[columns.duplicated()])))
        raise DataError(f"The data has duplicate column names {dup}; rename them.")
    seen: dict[str, str] = {}
    for c in map(str, columns):
        other = seen.setdefault(unicodedata.normalize("NFKC", c), c)
        if other != c:
            raise DataError(f"Columns {other!r} and {c!r} differ only in Unicode form (both read as "
                            f"{unicodedata.normalize('NFKC', c)!r}), so a rule could not tell them apart; "
                            f"rename one (e.g. with frame.rename(columns=...)).")


def reserved_names(features) -> None:
    """Refuse features named like the words rules and result tables use, or like learnopt's own
    placeholders (double underscores on both sides): each user name must mean one thing."""
    bad = [f for f in map(str, features) if unicodedata.normalize("NFKC", f) in RESERVED
           or re.fullmatch(r"__\w+__", f)]
    if bad:
        raise DataError(f"Feature column{'s' * (len(bad) > 1)} {', '.join(map(repr, bad))} "
                        f"{'are' if len(bad) > 1 else 'is'} named like words learnopt uses itself "
                        f"({', '.join(RESERVED)}, and __names__ for its placeholders); rename them (e.g. "
                        f"{bad[0]!r} -> {bad[0].strip('_') + '_value'!r}) so every name means one thing.")


def choose_features(columns, target: str | None, weights: str | None, features, intercept: bool,
                    offset: str | None = None) -> list:
    """The feature columns: those asked for (checked against ``columns``), or every column but
    the target, the weights and the offset; the same rules in memory and for sharded data."""
    if features is None:
        features = [c for c in columns if c not in (target, weights, offset)]
    else:
        features = [features] if isinstance(features, str) else list(features)
        missing = [f for f in features if f not in columns]
        if missing:
            raise DataError(f"Feature column(s) {missing} are not in the data."
                            f"{_close(missing[0], columns)} Columns: {', '.join(map(str, columns))}.")
        if target is not None and target in features:
            raise DataError(f"The target {target!r} is also listed as a feature; remove it from features.")
        if offset is not None and offset in features:
            raise DataError(f"The offset column {offset!r} is also listed as a feature; its coefficient is fixed "
                            f"at 1, so remove it from features.")
    if not features and not intercept:
        raise DataError("The task has no features and no intercept; nothing to fit.")
    reserved_names(features)
    return features


def _from_array(X, target, kind, features, weights, positive) -> Dataset:
    if sp.issparse(X):
        X = sp.csr_matrix(X)
        X = sp.csr_matrix((real_values(X.data, "The data matrix"), X.indices, X.indptr), shape=X.shape)
    else:
        X = np.asarray(X)
        if X.dtype.kind not in "biufc":
            raise DataError(f"The data matrix has dtype {X.dtype}; it must be numeric. Use a DataFrame "
                            f"for text columns.")
        X = real_values(X, "The data matrix")
        if X.ndim == 1:
            X = X[:, None]
        if X.ndim != 2:
            raise DataError(f"The data matrix must be 2-D (rows x features); got shape {X.shape}.")
        finite(X, "The data matrix")
    if X.shape[0] == 0:
        raise DataError("The data has no rows.")
    if target is None or isinstance(target, str):
        raise DataError("With array data, 'target' must be the array of target values (one per row), "
                        "not a column name.")
    yv = np.asarray(target).ravel()
    if yv.shape[0] != X.shape[0]:
        raise DataError(f"The target has {yv.shape[0]} values for {X.shape[0]} rows.")
    names = tuple(features) if features is not None else tuple(f"x{j}" for j in range(X.shape[1]))
    if len(names) != X.shape[1] or len(set(names)) != len(names):
        raise DataError(f"features must give {X.shape[1]} distinct names for the matrix columns; got {list(names)}.")
    w, _ = _weights(weights, None, X.shape[0])
    y, labels = _target(yv, kind, positive, "array")
    return Dataset(X, y, w, names, None, None, labels, _notes(X, names))


def _proportional(dense, names, span, limit: int = 400) -> list[str]:
    """Pairs of non-constant columns that are exact or near multiples of each other (|correlation|
    above 1 - 1e-10): their coefficients cannot be told apart. Checked for up to ``limit`` columns."""
    keep = np.flatnonzero(span > 0)
    if keep.size < 2 or keep.size > limit:
        return []
    Z = dense[:, keep] - dense[:, keep].mean(axis=0)
    Z = Z / np.linalg.norm(Z, axis=0)
    C = np.abs(Z.T @ Z)
    out = []
    for i, j in zip(*np.nonzero(np.triu(C, 1) > 1.0 - 1e-10)):
        a, b = keep[i], keep[j]
        ratio = float(np.dot(dense[:, b], dense[:, a]) / max(np.dot(dense[:, a], dense[:, a]), 1e-300))
        out.append(f"columns {names[a]!r} and {names[b]!r} are proportional ({names[b]} = {ratio:.6g} x "
                   f"{names[a]}, up to an offset): their coefficients cannot be told apart; drop one.")
    return out[:10]


def _id_like(frame: pd.DataFrame, columns) -> list[str]:
    """Text columns with a level for (nearly) every row: identifiers, not features."""
    out = []
    n = len(frame)
    for c in columns:
        col = frame[c]
        if column_type(col) == "category" and n >= 10:
            levels = col.nunique(dropna=True)
            if levels >= 0.5 * n:
                out.append(f"column {c!r} has {levels} distinct values in {n} rows: it looks like an "
                           f"identifier, not a feature (each level can fit its own rows exactly); drop it.")
    return out


def _notes(X, names) -> list[str]:
    """Data findings that do not stop the fit (reported by task.check())."""
    notes = []
    if X.shape[1] == 0:
        return notes
    dense = X.toarray() if sp.issparse(X) and X.shape[0] * X.shape[1] < 5e6 else X
    if sp.issparse(dense):
        return notes
    span = dense.max(axis=0) - dense.min(axis=0)
    const = [names[j] for j in np.flatnonzero(span == 0)]
    if const:
        notes.append(f"constant column(s) {const}: their coefficients are not identified apart from "
                     f"the intercept unless a penalty or rule pins them.")
    if X.shape[0] < X.shape[1]:
        notes.append(f"more features ({X.shape[1]}) than rows ({X.shape[0]}): without a penalty the "
                     f"coefficients are not unique, and the fit can reproduce the training rows exactly.")
    notes += _proportional(dense, names, span)
    scale = np.abs(dense).max(axis=0)
    scale = scale[scale > 0]
    if scale.size and scale.max() / scale.min() > 1e6:
        notes.append(f"column magnitudes differ by a factor {scale.max() / scale.min():.1e}; consider "
                     f"rescaling for accuracy.")
    return notes


def new_design(ds: Dataset, data) -> np.ndarray | sp.csr_matrix:
    """Design matrix of new data, encoded exactly like the training data."""
    if isinstance(data, (str, os.PathLike)):
        data = read_table(data)
    if ds.encoding is not None:
        if not isinstance(data, pd.DataFrame):
            raise DataError("This task was built from a DataFrame; give new data as a DataFrame "
                            f"with the columns {', '.join(ds.encoding.columns)}.")
        unique_columns(data.columns)
        return design(ds.encoding, data.reset_index(drop=True))
    if sp.issparse(data):
        X = sp.csr_matrix(data, dtype=float)
    else:
        X = np.asarray(data)
        if X.dtype.kind not in "biuf":
            raise DataError(f"The new data matrix has dtype {X.dtype}; it must hold numbers, like the "
                            f"training matrix (convert text first, e.g. with .astype(float)).")
        X = X.astype(float)
        if X.ndim == 1:
            X = X[None, :] if ds.d > 1 else X[:, None]
        finite(X, "The new data matrix")
    if X.shape[1] != ds.d:
        raise DataError(f"The new data has {X.shape[1]} columns; the task has {ds.d} features.")
    return X


def take_rows(ds: Dataset, rows: np.ndarray) -> Dataset:
    """The same dataset restricted to ``rows`` (encoding, names and labels unchanged)."""
    rows = np.asarray(rows)
    frame = ds.frame.iloc[rows] if ds.frame is not None else None
    return Dataset(ds.X[rows], ds.y[rows], ds.weights[rows], ds.names, frame, ds.encoding, ds.labels,
                   list(ds.notes), None if ds.offset is None else ds.offset[rows], ds.offset_source)


def design_with_ones(X, intercept: bool):
    if not intercept:
        return X
    ones = np.ones((X.shape[0], 1))
    return sp.hstack([X, sp.csr_matrix(ones)], format="csr") if sp.issparse(X) else np.hstack([X, ones])
