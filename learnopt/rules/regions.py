"""Region rules on named coordinates: convex polygons, balls, segments (``lo.rule.polygon`` ...).

Each compiles to the same Requirement objects as text rules, so it can be used on centres
(``lo.centres(...).require(lo.rule.polygon(...))``) or on coefficients alike. Requests that
are not convex (a non-convex polygon, staying outside a region, a minimum separation between
centres) raise NotConvexError with the reason and a convex alternative.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import Sequence

import numpy as np

from learnopt.core.errors import DataError, NotConvexError
from learnopt.rules.requirements import Context, Requirement, RuleSpec


def _select(ctx: Context, features: Sequence[str], text: str) -> np.ndarray:
    """Rows picking ``features`` out of the context's names (one row per feature)."""
    missing = [f for f in features if f not in ctx.names]
    if missing:
        raise DataError(f"Rule {text!r} names {missing}; the names are {list(ctx.names)}.")
    S = np.zeros((len(features), ctx.p))
    for row, f in enumerate(features):
        S[row, ctx.names.index(f)] = 1.0
    return S


@dataclass(frozen=True)
class Polygon(RuleSpec):
    vertices: tuple[tuple[float, float], ...]
    features: tuple[str, str]

    @property
    def text(self) -> str:
        return f"inside polygon {list(self.vertices)} on ({', '.join(self.features)})"

    def compile(self, ctx: Context) -> list[Requirement]:
        V = np.asarray(self.vertices, float)
        edges = np.roll(V, -1, axis=0) - V
        turn = edges[:, 0] * np.roll(edges, -1, axis=0)[:, 1] - edges[:, 1] * np.roll(edges, -1, axis=0)[:, 0]
        sign = np.sign(turn[np.abs(turn) > 1e-12 * max(1.0, np.abs(V).max())])
        if sign.size and not (np.all(sign > 0) or np.all(sign < 0)):
            majority = 1.0 if np.sum(sign > 0) >= np.sum(sign < 0) else -1.0
            bad = int((np.flatnonzero(np.sign(turn) == -majority)[0] + 1) % len(V))
            raise NotConvexError(f"Rule {self.text!r} is not convex: the polygon turns the other way at vertex "
                                 f"{bad} {tuple(V[bad])}, so the area is not convex. Use its convex hull, or split "
                                 f"the area into convex pieces and fit each piece separately.")
        orient = 1.0 if np.sum(turn) > 0 else -1.0         # counter-clockwise: inside is to the left
        S = _select(ctx, self.features, self.text)
        normals = orient * np.column_stack([edges[:, 1], -edges[:, 0]])   # outward normals
        A = normals @ S
        rhs = np.einsum("ij,ij->i", normals, V)
        return [Requirement(self.text, "<=", A, rhs)]


@dataclass(frozen=True)
class Ball(RuleSpec):
    centre: tuple[float, ...]
    radius: float
    features: tuple[str, ...]

    @property
    def text(self) -> str:
        return f"within {self.radius:g} of {self.centre} on ({', '.join(self.features)})"

    def compile(self, ctx: Context) -> list[Requirement]:
        S = _select(ctx, self.features, self.text)
        return [Requirement(self.text, "norm", S, -np.asarray(self.centre, float), 2, np.zeros(ctx.p),
                            float(self.radius))]


@dataclass(frozen=True)
class Segment(RuleSpec):
    start: tuple[float, ...]
    end: tuple[float, ...]
    features: tuple[str, ...]

    @property
    def text(self) -> str:
        return f"on the segment {self.start} - {self.end} on ({', '.join(self.features)})"

    def compile(self, ctx: Context) -> list[Requirement]:
        a, b = np.asarray(self.start, float), np.asarray(self.end, float)
        length = float(np.linalg.norm(b - a))
        S = _select(ctx, self.features, self.text)
        u = (b - a) / length
        across = np.eye(len(a)) - np.outer(u, u)            # (I - uu')(c - a) = 0: on the line
        basis = np.linalg.svd(across)[0][:, : len(a) - 1].T  # rank d - 1 rows
        on_line = Requirement(self.text, "==", basis @ S, basis @ a)
        along = Requirement(self.text, "<=", np.vstack([u @ S, -(u @ S)]), np.array([u @ a + length, -(u @ a)]))
        return [on_line, along]


def polygon(vertices: Sequence[Sequence[float]], features: Sequence[str] = ("x", "y")) -> Polygon:
    """Keep the point (a centre, or two coefficients) inside a convex polygon (vertices in order)."""
    V = tuple(tuple(float(v) for v in p) for p in vertices)
    if len(V) < 3 or any(len(p) != 2 for p in V) or len(features) != 2:
        raise DataError("polygon: give at least three (x, y) vertices in order and two feature names.")
    if not np.all(np.isfinite(np.asarray(V))):
        raise DataError("polygon: vertices must be finite numbers.")
    return Polygon(V, tuple(features))


def ball(centre: Sequence[float], radius: float, features: Sequence[str] = ("x", "y")) -> Ball:
    """Keep the point within ``radius`` (Euclidean) of ``centre``."""
    c = tuple(float(v) for v in centre)
    if len(c) != len(features) or not radius > 0 or not np.isfinite(radius):
        raise DataError("ball: give one centre coordinate per feature and a finite radius > 0.")
    return Ball(c, float(radius), tuple(features))


def segment(start: Sequence[float], end: Sequence[float], features: Sequence[str] = ("x", "y")) -> Segment:
    """Keep the point on the straight segment from ``start`` to ``end`` (a road, a shelf, a pipe)."""
    a, b = tuple(float(v) for v in start), tuple(float(v) for v in end)
    if len(a) != len(features) or len(b) != len(features) or np.allclose(a, b):
        raise DataError("segment: give two distinct end points with one coordinate per feature.")
    return Segment(a, b, tuple(features))


def outside(*_args, **_kwargs):
    """Staying outside a region is not convex; this always raises NotConvexError saying so."""
    raise NotConvexError("Keeping a point outside a region is not convex (the allowed set has a hole). "
                         "Convex alternative: describe where it may be as a convex polygon or a ball "
                         "(lo.rule.polygon / lo.rule.ball), or split the allowed area into convex pieces.")


def separation(*_args, **_kwargs):
    """A minimum distance between centres is not convex; this always raises NotConvexError saying so."""
    raise NotConvexError("A minimum separation between centres is not convex (the set of centre pairs at least "
                         "a distance apart has a hole). Convex alternative: give each centre its own region "
                         "(rules prefixed 'centre 2: ...') so that the regions are apart.")
