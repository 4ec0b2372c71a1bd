"""Sharded data: tables too large for one process, held as row blocks on a dask cluster.

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

import atexit
import glob as _glob
import os
import re
import time
from dataclasses import dataclass, field
from typing import Any, Sequence

import numpy as np
import pandas as pd

from .data import Encoding, _column, _close, _kind_of, design, encode, labels_of
from .errors import DataError, LearnoptError, MissingDependencyError, ParameterError

GLOB_CHARS = "*?["


def _dask():
    try:
        import dask
        import dask.dataframe as dd
    except ImportError as exc:
        raise MissingDependencyError("Sharded data needs dask and distributed: "
                                     "pip install 'learnopt[scale]'.") from exc
    return dask, dd


def is_sharded_source(data) -> bool:
    """A dask DataFrame, or a path with glob characters (several CSV / Parquet files)."""
    if isinstance(data, (str, os.PathLike)):
        return any(ch in os.fspath(data) for ch in GLOB_CHARS)
    mod = type(data).__module__ or ""
    return mod.startswith("dask") and hasattr(data, "to_delayed") and hasattr(data, "columns")


def read_glob(pattern: str):
    """A lazy dask DataFrame over every file matching ``pattern`` (all CSV or all Parquet)."""
    _, dd = _dask()
    pattern = os.fspath(pattern)
    files = sorted(_glob.glob(pattern))
    if not files:
        raise DataError(f"No files match {pattern!r}; check the pattern (relative paths are taken "
                        f"from the working directory {os.getcwd()!r}).")
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
    dask, _ = _dask()
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

    Has the in-memory :class:`~learnopt.data.Dataset`'s names (``names``, ``encoding``,
    ``labels``, ``notes``, ``n``, ``d``); ``X``, ``y``, ``weights`` and ``frame`` are None.
    """

    source: Any                           # the lazy dask DataFrame
    spec: BlockSpec
    n: int
    partitions: int
    label: str                            # what the user gave (pattern or "dask DataFrame")
    notes: list[str] = field(default_factory=list)
    X = y = weights = frame = None
    sharded = True

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
    if meta.columns.duplicated().any():
        raise DataError(f"The data has duplicate column names "
                        f"{sorted(set(map(str, meta.columns[meta.columns.duplicated()])))}; rename them.")
    _column(meta, target, "target")
    if weights is not None:
        col = _column(meta, weights, "weights")
        if not pd.api.types.is_numeric_dtype(col) or pd.api.types.is_bool_dtype(col):
            raise DataError(f"The weights column {weights!r} must be numeric.")
    if features is None:
        features = [c for c in meta.columns if c != target and c != weights]
    else:
        features = [features] if isinstance(features, str) else list(features)
        missing = [f for f in features if f not in meta.columns]
        if missing:
            raise DataError(f"Feature column(s) {missing} are not in the data.{_close(missing[0], meta.columns)} "
                            f"Columns: {', '.join(map(str, meta.columns))}.")
        if target in features:
            raise DataError(f"The target {target!r} is also listed as a feature; remove it from features.")
    if not features and not intercept:
        raise DataError("The task has no features and no intercept; nothing to fit.")
    if kind == "regression":
        tcol = meta[target]
        if not pd.api.types.is_numeric_dtype(tcol) or pd.api.types.is_bool_dtype(tcol):
            raise DataError(f"The target {target!r} must be numeric for regression (it is {tcol.dtype}); "
                            f"for labels use lo.classification.")
    text = [c for c in features if _kind_of(meta[c]) == "category"]
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
            y = col.to_numpy(dtype=float)
            if not np.all(np.isfinite(y)):
                raise DataError(f"The target {spec.target!r} has missing or infinite values (first at row "
                                f"{np.flatnonzero(~np.isfinite(y))[0]}); drop or fill those rows.")
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


# ---- the cluster

_LOCAL: dict = {}


def connect(client=None):
    """The distributed Client to use: the one given, a scheduler address, dask's default, or a
    local cluster learnopt starts (once per process)."""
    _dask()
    try:
        from distributed import Client, LocalCluster, default_client
    except ImportError as exc:
        raise MissingDependencyError("Sharded fits need distributed: pip install 'learnopt[scale]'.") from exc
    if isinstance(client, Client):
        return client
    if isinstance(client, str):
        key = ("address", client)
        if key not in _LOCAL:
            try:
                _LOCAL[key] = Client(client, set_as_default=False, timeout=10)
            except (OSError, TimeoutError) as exc:
                raise ParameterError(f"No dask scheduler answered at {client!r} ({exc}); check the "
                                     f"address, or leave client=None for a local cluster.") from None
        return _LOCAL[key]
    if client is not None:
        raise ParameterError(f"The 'client' parameter must be a distributed.Client, a scheduler address "
                             f"or None. Got {type(client).__name__} instead.")
    try:
        return default_client()
    except ValueError:
        pass
    if "local" not in _LOCAL:
        workers = max(1, min(os.cpu_count() or 1, 4))
        try:
            cluster = LocalCluster(n_workers=workers, threads_per_worker=1, processes=True,
                                   dashboard_address=":0", silence_logs=50)
        except (RuntimeError, OSError, TimeoutError) as exc:
            raise ParameterError(
                f"learnopt could not start a local dask cluster ({str(exc).splitlines()[0]}). Worker "
                f"processes import the script that starts them: put a script's work under "
                f"'if __name__ == \"__main__\":', or pass client= an existing distributed.Client or "
                f"scheduler address.") from None
        _LOCAL["local"] = Client(cluster, set_as_default=False)
        atexit.register(close_local)
    return _LOCAL["local"]


def close_local() -> None:
    """Close the clusters and connections learnopt opened itself."""
    for key in list(_LOCAL):
        client = _LOCAL.pop(key)
        cluster = client.cluster if key == "local" else None
        client.close()
        if cluster is not None:
            cluster.close()


def _add(parts):
    """Sum a list of results (numbers, arrays, or tuples of them) in a fixed order."""
    total = parts[0]
    for part in parts[1:]:
        total = tuple(a + b for a, b in zip(total, part)) if isinstance(total, tuple) else total + part
    return total


class Blocks:
    """The encoded partitions of a sharded dataset, held on the cluster for one fit.

    ``total(fn, *per_block, **common)`` runs ``fn(block, *per_block_args, **common)`` on every
    block and returns the sum of the (small) results; ``map`` returns the futures themselves
    (per-block state that stays on the workers). Seconds spent waiting for passes are counted
    in ``seconds`` and the number of passes in ``passes``.
    """

    def __init__(self, dataset: ShardedDataset, client=None):
        from dask import delayed
        self.client = connect(client)
        self.dataset = dataset
        parts = dataset.source.to_delayed()
        encode = delayed(encode_block, pure=True)
        t0 = time.perf_counter()
        self.futures = self.client.compute([encode(p, dataset.spec, k) for k, p in enumerate(parts)])
        self.passes, self.seconds = 0, time.perf_counter() - t0

    def __len__(self) -> int:
        return len(self.futures)

    def map(self, fn, *per_block, **common) -> list:
        return self.client.map(fn, self.futures, *per_block, pure=False, **common)

    def gather(self, futures) -> list:
        t0 = time.perf_counter()
        try:
            out = self.client.gather(futures)
        finally:
            self.seconds += time.perf_counter() - t0
            self.passes += 1
        return out

    def total(self, fn, *per_block, **common):
        return _add(self.gather(self.map(fn, *per_block, **common)))

    def pick(self, futures, index: int) -> list:
        """Futures of one element of each per-block tuple result (nothing moves to the client)."""
        return self.client.map(_item, futures, [index] * len(futures), pure=False)

    def release(self) -> None:
        self.futures = []


def _item(result, index):
    return result[index]


# ---- rules that average or sum predictions over rows

_AGGREGATE_CALL = re.compile(r"\b(mean|sum)\s*\(")


class _Slots:
    """Client side of a rule on sharded data: every mean(...) / sum(...) becomes a new coordinate
    after the coefficients (its value is linear in theta, known after one pass); its argument
    is checked on a sample of rows. Notes whether 'prediction' is used row by row."""

    def __init__(self, p: int, slots: int):
        self.p, self.slots, self.calls, self.depth, self.row_rule = p, slots, [], 0, False

    def saw_prediction(self, comp) -> None:
        if self.depth == 0:
            self.row_rule = True

    def __call__(self, comp, fn, arg, mask):
        from .rules import Affine, NormTerm, NoRows
        self.depth += 1
        try:
            v = comp.value(arg, mask)
        except NoRows:
            v = None                      # the sample has none of these rows; the pass decides
        finally:
            self.depth -= 1
        if v is not None and (isinstance(v, NormTerm) or v.rows is None):
            raise comp.fail(f"{fn}(...) takes one row-wise expression, e.g. {fn}(prediction where region == 'north').")
        j = len(self.calls)
        if j >= self.slots:       # pragma: no cover - slots are counted from the text
            raise comp.fail("too many mean(...) / sum(...) terms.")
        self.calls.append(fn)
        A = np.zeros((1, comp.ctx.p))
        A[0, self.p + j] = 1.0
        return Affine(A, np.zeros(1))


class _Partials:
    """Worker side: each mean(...) / sum(...) records (sum of rows, sum of constants, rows) here."""

    def __init__(self):
        self.parts = []

    def saw_prediction(self, comp) -> None:
        pass

    def __call__(self, comp, fn, arg, mask):
        from .rules import Affine, NoRows
        try:
            v = comp.value(arg, mask)
        except NoRows:
            v = None
        p = comp.ctx.p
        if v is None:
            self.parts.append((np.zeros(p), 0.0, 0))
            return Affine(np.zeros((1, p)), np.zeros(1))
        part = (np.asarray(v.A, float).sum(axis=0), float(np.sum(v.c)), int(v.A.shape[0]))
        self.parts.append(part)
        return Affine(part[0][None, :], np.array([part[1]]))


def _rule_partials(part: pd.DataFrame, spec: BlockSpec, texts, names, reference, intercept: bool, index: int):
    """For each rule text, the partial sums of its mean/sum terms on one partition."""
    from .routes.base import design_with_ones
    from .rules import Context, parse
    X, _, _ = encode_block(part, spec, index)
    frame = part.reset_index(drop=True)
    out = []
    for text in texts:
        hook = _Partials()
        ctx = Context(names, design_with_ones(X, intercept), frame, reference, aggregates=hook)
        try:
            parse(text, ctx)
        except LearnoptError:
            pass        # the client compile checked the rule; only the partial sums matter here
        out.append(hook.parts)
    return out


def compile_rules(task, specs) -> tuple[list, list[str]]:
    """Compile rules for a sharded task: (requirements, texts of rules row by row).

    Rules on coefficients compile at once; rules on mean(...) or sum(...) of predictions by one
    pass over the partitions (each term's sums added up, then substituted exactly). Rules on
    predictions row by row are checked on a sample of rows and returned as text: each
    partition compiles them for its own rows when the task is solved (consensus ADMM)."""
    from dask import delayed
    from .routes.base import design_with_ones
    from .rules import Context, NoRows, TextRule, compile_all, parse
    ds = task.dataset
    names = task.coefficient_names
    p = len(names)
    enc = ds.encoding
    reference = tuple(f"{c}={v}" for c, v in enc.reference.items())
    sample = None
    done: list = []
    pending = []          # (text, extended requirements, slots hook, place)
    problems, row_rules = [], []
    for spec in specs:
        if not isinstance(spec, TextRule):
            done.append(compile_all([spec], task.context()))
            continue
        slots = len(_AGGREGATE_CALL.findall(spec.text))
        if slots == 0 and "prediction" not in spec.text and " where " not in f" {spec.text} ":
            done.append(compile_all([spec], task.context()))
            continue
        if sample is None:
            sample = ds.source.head(200, npartitions=1).reset_index(drop=True)
            sX = design(enc, sample) if len(sample) else np.zeros((0, ds.d))
        hook = _Slots(p, slots)
        padded = np.hstack([design_with_ones(sX, task.intercept), np.zeros((len(sample), slots))])
        ctx = Context(names + tuple(f"\x00term{j}" for j in range(slots)), padded, sample, reference,
                      aggregates=hook)
        try:
            reqs = parse(spec.text, ctx)
        except NoRows:                 # a 'where' outside mean/sum selects none of the sample rows
            if hook.calls:
                problems.append(ROW_MIXED.format(text=spec.text))
            else:
                row_rules.append(spec.text)
            continue
        except LearnoptError as exc:
            problems.append(str(exc))
            continue
        if hook.row_rule:
            if hook.calls:
                problems.append(ROW_MIXED.format(text=spec.text))
            else:
                row_rules.append(spec.text)
            continue
        if not hook.calls:
            done.append([_narrow(r, p) for r in reqs])
            continue
        pending.append((spec.text, reqs, hook, len(done)))
        done.append([])
    if problems:
        raise DataError(problems[0] if len(problems) == 1 else
                        f"{len(problems)} rules could not be used:\n" + "\n".join(f"- {m}" for m in problems),
                        problems=problems)
    if pending:
        texts = [t for t, _, _, _ in pending]
        fn = delayed(_rule_partials, pure=True)
        parts = compute(ds.label, *[fn(part, ds.spec, texts, names, reference, task.intercept, k)
                                    for k, part in enumerate(ds.source.to_delayed())])
        for i, (text, reqs, hook, place) in enumerate(pending):
            terms = []
            for j, fn_name in enumerate(hook.calls):
                sumA = sum(pp[i][j][0] for pp in parts)
                sumc = sum(pp[i][j][1] for pp in parts)
                count = sum(pp[i][j][2] for pp in parts)
                if count == 0:
                    raise DataError(f"Rule {text!r}: the condition of its term {j + 1} ({fn_name}(...)) selects "
                                    f"no rows of the data.")
                k = 1.0 / count if fn_name == "mean" else 1.0
                terms.append((k * sumA, k * sumc))
            G = np.array([g for g, _ in terms])
            c = np.array([cc for _, cc in terms])
            done[place] = [_substitute(r, p, G, c) for r in reqs]
    return [r for group in done for r in group], row_rules


ROW_MIXED = ("Rule {text!r} mixes predictions row by row with mean(...) or sum(...) over rows; on "
             "sharded data write them as two rules.")


def row_requirements(part: pd.DataFrame, spec: BlockSpec, texts, names, reference, intercept: bool, index: int):
    """The rules row by row compiled on one partition's rows: one list of requirements per rule
    (empty when the partition has none of its rows)."""
    from .routes.base import design_with_ones
    from .rules import Context, NoRows, parse
    X, _, _ = encode_block(part, spec, index)
    ctx = Context(names, design_with_ones(X, intercept), part.reset_index(drop=True), reference)
    out = []
    for text in texts:
        try:
            out.append(parse(text, ctx) if len(X) else [])
        except NoRows:
            out.append([])
    return out


def _narrow(r, p: int):
    """A requirement compiled with term coordinates that it does not use, cut back to theta."""
    from dataclasses import replace
    return replace(r, A=r.A[:, :p], f=None if r.f is None else r.f[:p])


def _substitute(r, p: int, G: np.ndarray, c: np.ndarray):
    """Replace term coordinates phi_j = G_j theta + c_j in a requirement (exact: it is linear)."""
    from dataclasses import replace
    A, Aph = r.A[:, :p], r.A[:, p:]
    if r.sense == "norm":
        f, fph = r.f[:p], r.f[p:]
        return replace(r, A=A + Aph @ G, rhs=r.rhs + Aph @ c, f=f + fph @ G, bound=float(r.bound - fph @ c))
    return replace(r, A=A + Aph @ G, rhs=r.rhs - Aph @ c)


# ---- points for constrained centres

@dataclass(eq=False)
class ShardedPoints:
    """Points for :func:`learnopt.centres` that live on a dask cluster."""

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
    from .centres import coordinate_columns
    cols = coordinate_columns(meta, features, weights)
    if not cols:
        raise DataError("centres: the data has no numeric coordinate columns.")
    w = ddf[weights] if weights is not None else None
    n, positive = compute(label, ddf.map_partitions(len).sum(), (w > 0).sum() if w is not None else 0)
    n = int(n)
    if n == 0:
        raise DataError("centres: the data has no points.")
    return ShardedPoints(ddf, tuple(map(str, cols)), weights, n, int(positive) if w is not None else n, label)


def _point_block(part: pd.DataFrame, names, weights, index: int):
    X = part[list(names)].to_numpy(dtype=float)
    w = np.ones(len(X)) if weights is None else part[weights].to_numpy(dtype=float)
    if not np.all(np.isfinite(X)):
        row = int(np.flatnonzero(~np.all(np.isfinite(X), axis=1))[0])
        raise DataError(f"Partition {index} of the data: centres: missing or infinite coordinates (first at "
                        f"row {row}); drop or fill them.")
    if np.any(~np.isfinite(w)) or np.any(w < 0):
        raise DataError(f"Partition {index} of the data: centres: weights must be finite and >= 0.")
    return X, w


def _point_weight(block) -> float:
    return float(block[1].sum())


def _point_stats(block, C):
    """(assignment fingerprint, objective, W, S, (worst w d2, its point)) on one block."""
    import hashlib
    from .centres import assign
    X, w = block
    k, d = C.shape
    if len(X) == 0:
        return "", 0.0, np.zeros(k), np.zeros((k, d)), (-np.inf, np.zeros(d))
    labels, d2 = assign(X, C)
    W = np.bincount(labels, weights=w, minlength=k)
    S = np.vstack([np.bincount(labels, weights=w * X[:, j], minlength=k) for j in range(d)]).T
    worst = int(np.argmax(w * d2))
    return (hashlib.blake2b(labels.astype(np.int32).tobytes(), digest_size=16).hexdigest(), float(w @ d2), W, S,
            (float(w[worst] * d2[worst]), X[worst].copy()))


def _point_loads(block, C):
    from .centres import assign
    X, w = block
    k = C.shape[0]
    if len(X) == 0:
        return np.zeros(k), np.zeros(k)
    labels = assign(X, C)[0]
    return np.bincount(labels, weights=w, minlength=k), np.bincount(labels, minlength=k).astype(float)


def _point_sample(block, size: int, total: float, seed: int, index: int):
    """About size * (this block's weight / total) points drawn in proportion to their weights."""
    X, w = block
    if len(X) == 0 or w.sum() <= 0:
        return np.zeros((0, X.shape[1]))
    rng = np.random.default_rng([seed, index])
    m = rng.poisson(size * w.sum() / total)
    return X[rng.choice(len(X), size=m, p=w / w.sum())] if m else np.zeros((0, X.shape[1]))


def _partition_labels(part: pd.DataFrame, names, C) -> pd.Series:
    from .centres import assign
    if len(part) == 0:
        return pd.Series([], dtype=np.int64, name="centre")
    return pd.Series(assign(part[list(names)].to_numpy(dtype=float), C)[0] + 1, index=part.index, name="centre")


class PointBlocks:
    """The points of a sharded centres task held on the cluster for one solve."""

    SAMPLE = 20_000    # seeding sample size (k-means++ runs on it; the steps use every point)

    def __init__(self, points: ShardedPoints, client=None):
        from dask import delayed
        self.client = connect(client)
        self.points = points
        fn = delayed(_point_block, pure=True)
        self.futures = self.client.compute([fn(part, points.names, points.weights, k)
                                            for k, part in enumerate(points.source.to_delayed())])
        self.total = float(sum(self.client.gather(self.client.map(_point_weight, self.futures))))
        self.passes = 1

    def stats(self, C):
        self.passes += 1
        parts = self.client.gather(self.client.map(_point_stats, self.futures, C=np.asarray(C, float), pure=False))
        key = tuple(p[0] for p in parts)
        far = max((p[4] for p in parts), key=lambda t: t[0])[1]
        return key, sum(p[1] for p in parts), sum(p[2] for p in parts), sum(p[3] for p in parts), far

    def sample(self, seed: int) -> np.ndarray:
        size = min(self.SAMPLE, self.points.n)
        parts = self.client.gather(self.client.map(_point_sample, self.futures, [size] * len(self.futures),
                                                   [self.total] * len(self.futures), [seed] * len(self.futures),
                                                   list(range(len(self.futures))), pure=False))
        return np.vstack(parts)

    def loads(self, C, k: int):
        parts = self.client.gather(self.client.map(_point_loads, self.futures, C=np.asarray(C, float), pure=False))
        return sum(p[0] for p in parts), sum(p[1] for p in parts)

    def labels(self, C):
        return self.points.source.map_partitions(_partition_labels, self.points.names, np.asarray(C, float),
                                                 meta=pd.Series([], dtype=np.int64, name="centre"))


# ---- per-row summaries for reports

def _argument(part, spec, theta, intercept: bool, margin: bool, index: int):
    X, y, _ = encode_block(part, spec, index)
    score = X @ theta[:X.shape[1]] + (theta[-1] if intercept else 0.0)
    return y * score if margin else score - y


def _extent(part, spec, theta, intercept, margin, index):
    z = _argument(part, spec, theta, intercept, margin, index)
    return (float(z.min()), float(z.max())) if len(z) else (np.inf, -np.inf)


def _counts(part, spec, theta, intercept, margin, index, edges):
    return np.histogram(_argument(part, spec, theta, intercept, margin, index), bins=edges)[0]


def argument_histogram(dataset: ShardedDataset, theta, intercept: bool, margin: bool, bins: int = 40):
    """(counts, edges) of the loss argument (residuals or margins) over every row, by two passes."""
    import dask
    from dask import delayed
    parts = dataset.source.to_delayed()
    theta = np.asarray(theta, float)
    spans = dask.compute(*[delayed(_extent)(p, dataset.spec, theta, intercept, margin, k) for k, p in enumerate(parts)])
    low, high = min(s[0] for s in spans), max(s[1] for s in spans)
    edges = np.linspace(low, high if high > low else low + 1.0, bins + 1)
    counts = dask.compute(*[delayed(_counts)(p, dataset.spec, theta, intercept, margin, k, edges)
                            for k, p in enumerate(parts)])
    return np.sum(counts, axis=0), edges


# ---- held-out evaluation by passes

def _evaluation_part(part, spec: BlockSpec, w, b, loss, index: int) -> np.ndarray:
    """This partition's sums for the held-out metrics (see learnopt.evaluate)."""
    X, y, _ = encode_block(part, spec, index)
    score = X @ w + b
    n = float(len(y))
    if spec.kind == "regression":
        r = score - y
        mean = float(y.mean()) if n else 0.0
        return np.array([n, float(np.sum(loss.value(r))), float(r @ r), float(np.abs(r).sum()), mean,
                         float(((y - mean) ** 2).sum())])
    m = y * score
    pred = np.where(score > 0, 1.0, -1.0)
    counts = [float(np.sum((y == t) & (pred == p))) for t in (-1.0, 1.0) for p in (-1.0, 1.0)]
    return np.array([n, float(np.sum(loss.value(m))), float(np.sum(pred == y)), float(np.sum(m < 1)), *counts])


def evaluation_sums(task, w, b, data) -> np.ndarray:
    """Row sums of the held-out metrics over a sharded source (one pass; rows stay where they are).

    Regression: (n, loss, squared residuals, absolute residuals, y's mean and centred sum of
    squares, merged exactly across partitions). Classification: (n, loss, correct, inside the
    margin, the 2 x 2 confusion counts)."""
    import dask
    from dask import delayed
    if task.dataset.encoding is None or not isinstance(task.target_name, str):
        raise DataError("evaluate() on sharded data needs a task built from a table with a named target column.")
    ddf, _ = as_frame(data)
    if task.target_name not in ddf.columns:
        raise DataError(f"The evaluation data has no target column {task.target_name!r}.")
    spec = BlockSpec(task.dataset.encoding, task.target_name, None, task.kind, task.dataset.labels)
    fn = delayed(_evaluation_part, pure=True)
    parts = dask.compute(*[fn(p, spec, np.asarray(w, float), float(b), task.loss, k)
                           for k, p in enumerate(ddf.to_delayed())])
    parts = [p for p in parts if p[0] > 0]
    if not parts:
        raise DataError("The evaluation data has no rows.")
    if task.kind != "regression":
        return np.sum(parts, axis=0)
    total = np.sum(parts, axis=0)
    n = total[0]
    mean = sum(p[0] * p[4] for p in parts) / n
    total[4] = mean
    total[5] = sum(p[5] + p[0] * (p[4] - mean) ** 2 for p in parts)    # Chan et al.'s merge
    return total
