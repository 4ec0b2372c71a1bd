"""What a solve records besides the point: each solver attempt and where the time went."""
from __future__ import annotations

from dataclasses import dataclass

import numpy as np


@dataclass(frozen=True)
class Attempt:
    """One solver run: what was tried and what came of it."""

    solver: str
    outcome: str          # solver status, certificate verdict or the error
    objective: float = np.nan
    gap: float = np.nan
    seconds: float = 0.0


@dataclass(frozen=True)
class Timings:
    """Seconds spent, measured by learnopt: build, compile, solve, certify, total."""

    build: float = 0.0
    compile: float = 0.0
    solve: float = 0.0
    certify: float = 0.0
    total: float = 0.0

    def as_dict(self) -> dict[str, float]:
        return dict(build=self.build, compile=self.compile, solve=self.solve,
                    certify=self.certify, total=self.total)

    def __repr__(self) -> str:
        return "Timings(" + ", ".join(f"{k}={v:.4f}s" for k, v in self.as_dict().items()) + ")"
