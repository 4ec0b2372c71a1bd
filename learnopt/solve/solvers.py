"""The solver registry: each open solver is one entry of data, chosen by capability.

An entry says which problem classes the solver handles (through cvxpy), which Python module
it needs, and how learnopt's single ``tol`` maps to its own options. :func:`plan` returns the
solvers to try, in order, for a problem class.
"""
from __future__ import annotations

import functools
from dataclasses import dataclass
from typing import Callable

import cvxpy as cp

from learnopt.core.errors import SolverError
from learnopt.terms.cones import CLASS_LABEL, CLASSES
from learnopt.core.checks import nearest

@functools.lru_cache(maxsize=1)
def _installed() -> frozenset[str]:
    """cvxpy's list of importable solvers (it probes every module, so ask once)."""
    return frozenset(cp.installed_solvers())




@dataclass(frozen=True)
class SolverSpec:
    """One solver: name, cvxpy name, the module it needs, classes it handles, tol mapping."""

    name: str
    cvxpy_name: str
    module: str
    handles: frozenset[str]
    options: Callable[[float], dict]
    extra: str = ""  # pip extra that installs it, if not a core dependency
    time_option: str | None = None  # the solver's own wall-clock limit option, if it has one

    def settings(self, tol: float, time_limit: float | None = None) -> dict:
        """The solver's own options for learnopt's tol (and time limit, where it has one)."""
        out = self.options(tol)
        if time_limit is not None and self.time_option:
            out[self.time_option] = float(time_limit)
        return out

    def installed(self) -> bool:
        return self.cvxpy_name in _installed()

    def why_not(self, problem_class: str) -> str | None:
        """Reason this solver cannot solve the class, or None."""
        if not self.installed():
            how = f"pip install 'learnopt[{self.extra}]'" if self.extra else f"pip install {self.module}"
            return f"{self.name} is not installed ({how})"
        if problem_class not in self.handles:
            return (f"{self.name} cannot solve {CLASS_LABEL[problem_class]} problems "
                    f"(it handles {', '.join(CLASS_LABEL[c] for c in CLASSES if c in self.handles)})")
        return None


REGISTRY: dict[str, SolverSpec] = {s.name: s for s in (
    SolverSpec("clarabel", "CLARABEL", "clarabel", frozenset(CLASSES),
               lambda tol: dict(tol_gap_abs=tol, tol_gap_rel=tol, tol_feas=tol, max_iter=500),
               time_option="time_limit"),
    SolverSpec("osqp", "OSQP", "osqp", frozenset({"linear", "quadratic"}),
               lambda tol: dict(eps_abs=tol, eps_rel=tol, max_iter=200_000, polish=True),
               time_option="time_limit"),
    SolverSpec("scs", "SCS", "scs", frozenset(CLASSES),
               lambda tol: dict(eps_abs=tol, eps_rel=tol, max_iters=200_000),
               time_option="time_limit_secs"),
    SolverSpec("ecos", "ECOS", "ecos", frozenset(CLASSES),
               lambda tol: dict(abstol=max(tol, 1e-12), reltol=max(tol, 1e-12), feastol=max(tol, 1e-12),
                                max_iters=500), extra="solvers"),
    SolverSpec("highs", "HIGHS", "highspy", frozenset({"linear", "quadratic"}),
               lambda tol: dict(primal_feasibility_tolerance=max(tol, 1e-10),
                                dual_feasibility_tolerance=max(tol, 1e-10),
                                ipm_optimality_tolerance=max(tol, 1e-12), output_flag=False),
               extra="solvers", time_option="time_limit"),
)}

# preferred order per problem class (first installed and capable wins; the rest are fallbacks)
PREFERENCE: dict[str, tuple[str, ...]] = {
    "linear": ("highs", "clarabel", "ecos", "scs", "osqp"),
    "quadratic": ("clarabel", "osqp", "ecos", "scs", "highs"),
    "second_order": ("clarabel", "ecos", "scs"),
    "exponential": ("clarabel", "scs", "ecos"),
}


def installed() -> list[str]:
    """Names of the registered solvers that are installed."""
    return [n for n, s in REGISTRY.items() if s.installed()]


def lookup(name: str) -> SolverSpec:
    key = str(name).lower()
    if key not in REGISTRY:
        raise SolverError(f"Unknown solver {name!r}{nearest(key, REGISTRY, n=2)}."
                          + f" Installed: {', '.join(installed())}; known: {', '.join(REGISTRY)}.")
    return REGISTRY[key]


def plan(problem_class: str, solver: str | None, *, fallback: bool = True,
         prefer: tuple[str, ...] = ()) -> list[SolverSpec]:
    """Solvers to try, in order. An explicit ``solver`` goes first (and alone when fallback=False);
    ``prefer`` (a route's own knowledge of what suits its problems) goes before the class order."""
    chain: list[SolverSpec] = []
    if solver is not None:
        spec = lookup(solver)
        why = spec.why_not(problem_class)
        if why:
            capable = [s.name for s in REGISTRY.values() if s.why_not(problem_class) is None]
            raise SolverError(f"{why}. Installed solvers that can: {', '.join(capable) or 'none'}.")
        chain.append(spec)
        if not fallback:
            return chain
    for name in tuple(prefer) + PREFERENCE[problem_class]:
        spec = REGISTRY[name]
        if spec not in chain and spec.why_not(problem_class) is None:
            chain.append(spec)
    if not chain:
        raise SolverError(f"No installed solver can solve {CLASS_LABEL[problem_class]} problems; "
                          f"install clarabel or scs.")
    return chain
