"""Shaped effects: one numeric feature expanded into a basis whose coefficients linear rules
can shape (increasing, decreasing, convex, concave).

Two forms, knots chosen once from the training rows and kept in the encoding (so new data and
a loaded model file expand the same way):

* ``lines`` (piecewise-linear spline): columns ``x``, ``(x - k_1)_+``, ..., ``(x - k_m)_+``,
  named ``feature.slope``, ``feature.turn1``, ..., ``feature.turnm``. The slope on piece s
  (between knots k_s and k_{s+1}) is ``slope + turn1 + ... + turns``; ``turnj`` is the change
  of slope at knot k_j. Knots lie strictly inside the training range.
* ``steps`` (piecewise-constant): columns ``1[x >= k_j]``, named ``feature.step1``, ...; the
  effect jumps by ``stepj`` at k_j (the intercept carries the level below the first knot).

Knots sit at quantiles j/pieces (j = 1 .. pieces-1) of the training values (rows unweighted),
taken at data values; when ``pieces`` is at least the number of distinct values, every distinct
value inside the range is a knot (for ``steps`` with an intercept this is isotonic regression).
"""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from learnopt.core.checks import nearest
from learnopt.core.errors import DataError
from learnopt.data.encoding import column_type, design, encode, real_values
from learnopt.data.table import Dataset, _id_like, _notes

FORMS = ("lines", "steps")


@dataclass(frozen=True)
class Basis:
    """How one feature is expanded: its form, its knots and the training range."""

    feature: str
    form: str
    knots: tuple[float, ...]
    low: float
    high: float

    @property
    def names(self) -> tuple[str, ...]:
        """Coefficient names, dot-separated like encoded levels (``distance_km.turn2``)."""
        if self.form == "lines":
            return (f"{self.feature}.slope",) + tuple(f"{self.feature}.turn{j}" for j in range(1, len(self.knots) + 1))
        return tuple(f"{self.feature}.step{j}" for j in range(1, len(self.knots) + 1))

    def columns(self, x: np.ndarray) -> np.ndarray:
        """The basis columns at the values ``x`` (n x len(names))."""
        x = np.asarray(x, dtype=float).reshape(-1, 1)
        k = np.asarray(self.knots, dtype=float).reshape(1, -1)
        if self.form == "lines":
            return np.hstack([x, np.maximum(x - k, 0.0)])
        return (x >= k).astype(float)

    def plain(self) -> dict:
        return {"form": self.form, "knots": [float(v) for v in self.knots], "low": float(self.low),
                "high": float(self.high)}


def basis_from_plain(feature: str, entry) -> Basis:
    """A basis as a model file holds it (see :meth:`Basis.plain`)."""
    keys = {"form", "knots", "low", "high"}
    if not isinstance(entry, dict) or set(entry) != keys or entry.get("form") not in FORMS \
            or not isinstance(entry.get("knots"), list):
        raise DataError(f"The model file's shape of {feature!r} is {entry!r}; it needs the keys "
                        f"{sorted(keys)} with form one of {', '.join(FORMS)}; the file was damaged or edited by hand.")
    return Basis(feature, entry["form"], tuple(float(v) for v in entry["knots"]), float(entry["low"]),
                 float(entry["high"]))


def choose_knots(x: np.ndarray, pieces: int, form: str) -> tuple[float, ...]:
    """Knots at quantiles of ``x`` (see the module text)."""
    values = np.unique(x)
    low, high = values[0], values[-1]
    inner = values[1:-1] if form == "lines" else values[1:]
    if len(inner) <= pieces - 1:
        return tuple(float(v) for v in inner)
    knots = np.unique(np.quantile(x, np.arange(1, pieces) / pieces, method="inverted_cdf"))
    knots = knots[(knots > low) & ((knots < high) if form == "lines" else True)]
    if not len(knots):
        knots = inner[[len(inner) // 2]]
    return tuple(float(v) for v in knots)


def shaped_dataset(ds: Dataset, feature: str, pieces: int, form: str, intercept: bool) -> tuple[Dataset, Basis]:
    """``ds`` with ``feature`` expanded into its basis (knots from its rows)."""
    enc = ds.encoding
    if enc is None or ds.frame is None:
        raise DataError(f"shape({feature!r}): shaped effects need a DataFrame (named columns); this task was "
                        f"built from an array. Build it from a pandas DataFrame.")
    if feature not in enc.columns:
        raise DataError(f"shape({feature!r}): {feature!r} is not a feature of the task.{nearest(feature, enc.columns)}"
                        f" Features: {', '.join(map(str, enc.columns))}.")
    if feature in enc.shapes:
        raise DataError(f"shape({feature!r}): {feature!r} is shaped already; give all its shape words in one "
                        f"call, e.g. shape({feature!r}, \"increasing concave\").")
    col = ds.frame[feature]
    if column_type(col) != "numeric":
        raise DataError(f"shape({feature!r}): {feature!r} is not numeric (it is {col.dtype}); a shape needs "
                        f"numbers. Convert it with frame[{feature!r}].astype(float), or leave it unshaped.")
    x = real_values(col.to_numpy(), f"Column {feature!r}")
    distinct = len(np.unique(x))
    need = 3 if form == "lines" else 2
    if distinct < need:
        fix = ("it has no effect apart from the intercept; drop it" if distinct == 1 else
               f"a straight line is all it can have; leave it unshaped and write a rule on its sign "
               f"(\"{feature} >= 0\") or use form=\"steps\"")
        raise DataError(f"shape({feature!r}): {feature!r} has {distinct} distinct value(s); the {form} form needs "
                        f"at least {need}: {fix}.")
    basis = Basis(feature, form, choose_knots(x, pieces, form), float(x.min()), float(x.max()))
    new = encode(ds.frame, enc.columns, intercept, shapes={**enc.shapes, feature: basis})
    X = design(new, ds.frame)
    notes = _id_like(ds.frame, new.columns) + _notes(X, new.names)
    return Dataset(X, ds.y, ds.weights, new.names, ds.frame, new, ds.labels, notes), basis
