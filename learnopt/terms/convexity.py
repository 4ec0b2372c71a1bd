"""The convexity verdict, decided in one place from the facts each building block declares.

Built-in losses, penalties and rules are convex by construction (rules are checked while they
are parsed). Custom terms are cvxpy expressions: they are accepted only when cvxpy's
disciplined-convex rules prove them convex. When they do not, :func:`explain` names the
smallest offending sub-expressions and looks for a numeric counterexample (two points where
the function lies above its chord); a counterexample proves non-convexity, a DCP failure alone
does not.
"""
from __future__ import annotations

from dataclasses import dataclass, field

import cvxpy as cp
import numpy as np

from learnopt.core.errors import NotConvexError

SURROGATES = "hinge, logistic or squared_hinge"


def cone_of(expr: cp.Expression) -> str:
    """Cone class a solver needs for a convex expression: linear, quadratic, second_order, exponential."""
    if expr.is_pwl():
        return "linear"
    if expr.is_qpwa():
        return "quadratic"
    names = {type(a).__name__ for a in _atoms(expr)}
    if names & {"exp", "log", "logistic", "log_sum_exp", "entr", "kl_div", "rel_entr", "log1p"}:
        return "exponential"
    return "second_order"


def _atoms(expr):
    stack = [expr]
    while stack:
        e = stack.pop()
        yield e
        stack.extend(getattr(e, "args", []))


def _offenders(expr: cp.Expression) -> list[cp.Expression]:
    """Smallest sub-expressions that break the rules (children fine, node not)."""
    found = []

    def bad(e):
        return not e.is_dcp()

    def walk(e):
        kids = [a for a in getattr(e, "args", []) if isinstance(a, cp.Expression)]
        bad_kids = [k for k in kids if bad(k)]
        if bad_kids:
            for k in bad_kids:
                walk(k)
        elif bad(e):
            found.append(e)

    if not expr.is_dcp():
        walk(expr)
        return found
    # DCP but not convex (concave or non-convex affine sums): smallest non-convex pieces
    def walk_cvx(e):
        kids = [a for a in getattr(e, "args", []) if isinstance(a, cp.Expression)]
        bad_kids = [k for k in kids if not k.is_convex()]
        if bad_kids:
            for k in bad_kids:
                walk_cvx(k)
        else:
            found.append(e)

    walk_cvx(expr)
    return found


def counterexample(fn, size: int, *, seed: int = 0, trials: int = 400):
    """Search for x, y with f((x+y)/2) > (f(x)+f(y))/2: proof that f is not convex.

    ``fn`` maps a cvxpy Variable of length ``size`` to a scalar (or per-row summed) expression.
    Returns (x, y, f_mid, chord_mid) or None.
    """
    rng = np.random.default_rng(seed)
    var = cp.Variable(size, name="v")
    expr = fn(var)
    if expr.size > 1:
        expr = cp.sum(expr)

    def f(x):
        var.value = x
        try:
            v = expr.value
        except Exception:  # noqa: BLE001 - outside the domain of an atom
            return None
        return None if v is None or not np.isfinite(v) else float(v)

    for t in range(trials):
        scale = 10.0 ** rng.uniform(-2, 2)
        x, y = rng.normal(scale=scale, size=size), rng.normal(scale=scale, size=size)
        if t % 3 == 1:
            x, y = np.abs(x), np.abs(y)  # stay inside domains such as sqrt's
        fx, fy, fm = f(x), f(y), f((x + y) / 2)
        if None in (fx, fy, fm):
            continue
        chord = (fx + fy) / 2
        if fm > chord + 1e-9 * (1 + abs(chord)):
            return x, y, fm, chord
    return None


def require_convex(fn, size: int, what: str, variable: str) -> cp.Expression:
    """Build ``fn`` on a Variable named ``variable``; raise NotConvexError with the evidence if not convex."""
    var = cp.Variable(size, name=variable)
    try:
        expr = fn(var)
    except Exception as exc:  # noqa: BLE001 - user code
        raise NotConvexError(f"{what} could not be built from a cvxpy variable: {exc}. It must be a "
                             f"function of the cvxpy vector {variable!r} written with cvxpy atoms.") from None
    if not isinstance(expr, cp.Expression):
        raise NotConvexError(f"{what} must return a cvxpy expression; it returned {type(expr).__name__}.")
    if expr.is_dcp() and expr.is_convex():
        return expr
    pieces = "; ".join(str(e) for e in _offenders(expr)[:3]) or str(expr)
    ce = counterexample(fn, size)
    if ce is not None:
        x, y, fm, chord = ce
        proof = (f" Counterexample (proves it is not convex): at x = {np.round(x, 4).tolist()} and "
                 f"y = {np.round(y, 4).tolist()} the midpoint value {fm:.6g} lies above the chord "
                 f"{chord:.6g}.")
    else:
        proof = (" No counterexample was found by a midpoint test, so the function may still be "
                 "convex: rewrite it with convex atoms (e.g. norm2(w) instead of sqrt(sum_squares(w))).")
    raise NotConvexError(f"{what} is not provably convex. Offending part: {pieces}.{proof}")


def verdict_text(head: str, pieces, reasons, data) -> str:
    """A verdict as text: its head line, then each piece, reason and data finding."""
    lines = [f"verdict: {head}"]
    lines += [f"  {p}: {fact}" for p, fact in pieces]
    lines += [f"  reason: {r}" for r in reasons]
    lines += [f"  data: {d}" for d in data] or ["  data: no problems found"]
    return "\n".join(lines)


@dataclass
class Verdict:
    """Result of ``task.check()``: convexity and data findings, without solving."""

    convex: bool
    problem_class: str
    pieces: list[tuple[str, str]] = field(default_factory=list)   # (piece, fact)
    reasons: list[str] = field(default_factory=list)
    data: list[str] = field(default_factory=list)

    def __bool__(self) -> bool:
        return self.convex

    def __str__(self) -> str:
        head = ("convex by construction" if self.convex else "NOT convex")
        return verdict_text(f"{head} (problem class: {self.problem_class})", self.pieces, self.reasons, self.data)

    __repr__ = __str__
