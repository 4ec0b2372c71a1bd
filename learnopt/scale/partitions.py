"""Rules on sharded data, compiled partition by partition: mean(...) / sum(...) of predictions by
one pass (each term's sums added up and substituted exactly), rules row by row inside each
partition when the task is solved.
"""
from __future__ import annotations

import re
from dataclasses import replace

import numpy as np
import pandas as pd

from learnopt.core.errors import DataError, LearnoptError
from learnopt.data.sharded import BlockSpec, compute, encode_block
from learnopt.data.encoding import design
from learnopt.data.table import design_with_ones
from learnopt.rules.language import parse
from learnopt.rules.objects import TextRule, compile_all
from learnopt.rules.requirements import Affine, Context, NormTerm, NoRows

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


def _rule_partials(part: pd.DataFrame, spec: BlockSpec, texts, names, intercept: bool, index: int):
    """For each rule text, the partial sums of its mean/sum terms on one partition."""
    X, _, _ = encode_block(part, spec, index)
    frame = part.reset_index(drop=True)
    out = []
    for text in texts:
        hook = _Partials()
        ctx = Context(names, design_with_ones(X, intercept), frame, spec.encoding.reference_names,
                      spec.encoding.former_names, aggregates=hook)
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
    ds = task.dataset
    names = task.coefficient_names
    p = len(names)
    enc = ds.encoding
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
        ctx = Context(names + tuple(f"\x00term{j}" for j in range(slots)), padded, sample, enc.reference_names,
                      enc.former_names, aggregates=hook)
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
            done.append([replace(_narrow(r, p), rule=spec.text) for r in reqs])
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
        parts = compute(ds.label, *[fn(part, ds.spec, texts, names, task.intercept, k)
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
            done[place] = [replace(_substitute(r, p, G, c), rule=text) for r in reqs]
    return [r for group in done for r in group], row_rules


ROW_MIXED = ("Rule {text!r} mixes predictions row by row with mean(...) or sum(...) over rows; on "
             "sharded data write them as two rules.")


def row_requirements(part: pd.DataFrame, spec: BlockSpec, texts, names, intercept: bool, index: int):
    """The rules row by row compiled on one partition's rows: one list of requirements per rule
    (empty when the partition has none of its rows)."""
    X, _, _ = encode_block(part, spec, index)
    enc = spec.encoding
    ctx = Context(names, design_with_ones(X, intercept), part.reset_index(drop=True), enc.reference_names,
                  enc.former_names)
    out = []
    for text in texts:
        try:
            out.append(parse(text, ctx) if len(X) else [])
        except NoRows:
            out.append([])
    return out


def _narrow(r, p: int):
    """A requirement compiled with term coordinates that it does not use, cut back to theta."""
    return replace(r, A=r.A[:, :p], f=None if r.f is None else r.f[:p])


def _substitute(r, p: int, G: np.ndarray, c: np.ndarray):
    """Replace term coordinates phi_j = G_j theta + c_j in a requirement (exact: it is linear)."""
    A, Aph = r.A[:, :p], r.A[:, p:]
    if r.sense == "norm":
        f, fph = r.f[:p], r.f[p:]
        return replace(r, A=A + Aph @ G, rhs=r.rhs + Aph @ c, f=f + fph @ G, bound=float(r.bound - fph @ c))
    return replace(r, A=A + Aph @ G, rhs=r.rhs - Aph @ c)
