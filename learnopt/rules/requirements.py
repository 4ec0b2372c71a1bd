"""The compiled form of rules: requirements over theta = (coefficients, intercept), the context a
rule is compiled against, and the base class of rule objects.

Every rule compiles to :class:`Requirement` objects:

* ``A theta <= rhs`` or ``A theta == rhs`` (one row per scalar condition or selected data row);
* ``||A theta + offset||_order + f . theta <= bound`` for norm rules.
"""
from __future__ import annotations

from dataclasses import dataclass, field
from typing import Mapping

import numpy as np
import pandas as pd

from learnopt.core.errors import DataError


# ----------------------------------------------------------------------------- compiled form

class NoRows(DataError):
    """A rule's 'where' condition selects no rows (of the data, or of one partition of it)."""


@dataclass(frozen=True, eq=False)
class Requirement:
    """One compiled requirement. ``sense`` is "<=", "==" or "norm". ``text`` is this piece's
    own text (one half of a chained rule, say); ``rule`` the whole rule as the user wrote it."""

    text: str
    sense: str
    A: np.ndarray
    rhs: np.ndarray
    order: float | None = None
    f: np.ndarray | None = None
    bound: float | None = None
    rule: str | None = None
    note: str = ""                  # how the rows were derived, for check() (a box's corners, say)

    @property
    def source(self) -> str:
        """The rule this requirement came from, as the user wrote it."""
        return self.rule if self.rule is not None else self.text

    @property
    def rows(self) -> int:
        return self.A.shape[0]

    def violation(self, theta: np.ndarray) -> float:
        """Largest amount by which theta breaks this requirement (0 when it holds)."""
        if self.sense == "norm":
            lhs = np.linalg.norm(self.A @ theta + self.rhs, self.order) + self.f @ theta
            return max(0.0, float(lhs - self.bound))
        diff = self.A @ theta - self.rhs
        if self.sense == "==":
            return float(np.max(np.abs(diff))) if diff.size else 0.0
        return max(0.0, float(np.max(diff))) if diff.size else 0.0

    def scale(self) -> float:
        """Size of the numbers in this requirement, for relative tolerances."""
        if self.sense == "norm":
            return 1.0 + abs(self.bound)
        return 1.0 + (float(np.max(np.abs(self.rhs))) if self.rhs.size else 0.0)

    def slack(self, theta: np.ndarray) -> np.ndarray:
        """Per-row slack (>= 0 when the row holds strictly or exactly)."""
        if self.sense == "norm":
            lhs = np.linalg.norm(self.A @ theta + self.rhs, self.order) + self.f @ theta
            return np.array([self.bound - lhs])
        diff = self.rhs - self.A @ theta
        return -np.abs(diff) if self.sense == "==" else diff


@dataclass(frozen=True)
class Context:
    """What a rule can refer to: coefficient names, the design, and the raw data columns."""

    names: tuple[str, ...]          # coefficient names, 'intercept' last when present
    design: object | None           # n x p design (dense or CSR, with the column of ones), or None
    frame: pd.DataFrame | None      # raw data columns, row-aligned with design
    reference: tuple[str, ...] = () # reference levels of encoded columns: coefficients fixed at 0
    former: Mapping[str, str] = field(default_factory=dict)  # replaced level names -> names now
    no_rows: str = ""               # why rules cannot refer to data rows here (sharded data)
    aggregates: object | None = None  # sharded data: hook(compiler, fn, node, mask) for mean/sum
    encoding: object | None = None  # the data's encoding (columns, levels, reference), when it has one

    @property
    def p(self) -> int:
        return len(self.names)


class RuleSpec:
    """Anything that compiles to requirements against a context."""

    text: str

    def compile(self, ctx: Context) -> list[Requirement]:  # pragma: no cover - interface
        raise NotImplementedError


# ----------------------------------------------------------------------------- affine values

@dataclass
class Affine:
    """Value A @ theta + c; one row (scalar) or one row per selected data row (vector)."""

    A: np.ndarray
    c: np.ndarray
    rows: np.ndarray | None = None   # indices of data rows for a vector, None for a scalar

    @property
    def constant(self) -> bool:
        return not np.any(self.A)


@dataclass
class NormTerm:
    """k * ||A theta + c||_order + affine part (a convex scalar)."""

    k: float
    A: np.ndarray
    c: np.ndarray
    order: float
    affine: Affine
    source: str
