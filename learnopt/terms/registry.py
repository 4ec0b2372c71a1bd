"""Registry rows for the named building blocks: one frozen spec per loss or penalty.

A row names the block, says how to make it (``factory``: the public constructor; its keyword
names are the block's parameters, in recipes too) and carries examples with non-default
parameters, which the common tests run through every check. A loss row also says which task
kinds the loss serves. The tables live next to the blocks: ``losses.LOSSES`` and
``penalties.PENALTIES``; adding a block is its class (with its constructor) plus one row.
"""
from __future__ import annotations

import inspect
from dataclasses import dataclass, field
from typing import Callable

from learnopt.core import checks as params

KINDS = ("regression", "classification")

# penalty examples name their coefficients from these (the common tests fit tasks with them)
EXAMPLE_NAMES = ("a", "b", "c", "d")


@dataclass(frozen=True)
class TermSpec:
    """What every row has: the name, the constructor, examples."""

    name: str
    factory: Callable
    examples: tuple = ()

    def _signature(self):
        return [p for p in inspect.signature(self.factory).parameters.values()
                if p.kind not in (p.VAR_POSITIONAL, p.VAR_KEYWORD)]

    @property
    def parameters(self) -> tuple[str, ...]:
        """The constructor's parameter names, in order."""
        return tuple(p.name for p in self._signature())

    @property
    def required(self) -> tuple[str, ...]:
        """The parameters without a default value."""
        return tuple(p.name for p in self._signature() if p.default is p.empty)


@dataclass(frozen=True)
class LossSpec(TermSpec):
    """A registered loss: ``kinds`` are the task kinds it serves, ``aliases`` other names for
    its default form (``by_name`` accepts them)."""

    kinds: tuple[str, ...] = field(default=(), kw_only=True)
    aliases: tuple[str, ...] = field(default=(), kw_only=True)

    def __post_init__(self):
        unknown = [k for k in self.kinds if k not in KINDS]
        if not self.kinds or unknown:
            raise params.refusal(f"LossSpec {self.name!r}", "kinds", self.kinds,
                                 f"a non-empty tuple of task kinds taken from {', '.join(map(repr, KINDS))}")

    @property
    def convex(self) -> bool:
        """Can a task be fitted with it (the 0-1 loss is registered only to be refused)."""
        return bool(self.factory().convex)


@dataclass(frozen=True)
class PenaltySpec(TermSpec):
    """A registered penalty (its examples use the coefficient names in ``EXAMPLE_NAMES``)."""
