"""Rules that cannot hold together: which ones conflict, and by how much each must move.

When a solver says a task is infeasible, learnopt checks the claim itself and, when it holds,
names the conflict:

1. An *irreducible* conflicting set of rules, found by the deletion filter (J. W. Chinneck,
   Feasibility and Infeasibility in Optimization, Springer 2008, chapter 6; from memory): try
   dropping each rule in turn, and drop it for good when the rest still conflict. Every rule
   left is needed for the conflict: moving any one of them far enough resolves it.
2. For each rule of that set, the smallest amount by which that rule alone must move for all
   the task's rules to hold, in the rule's own units (the units of its two sides as written:
   ``2*x >= 1000`` moves in units of ``2*x``; a rule over many rows moves all its rows together;
   an equality may move either way; a norm rule moves its bound). ``inf`` when moving that
   rule alone is not enough (another conflict remains).

Rules are the texts the user wrote (a chained rule such as ``0 <= x <= 2`` is one rule). Each
amount is a small linear program (HiGHS, a vertex, so exact to round-off) or, with norm rules, a
second-order cone program (Clarabel at tight tolerances).
"""
from __future__ import annotations


import cvxpy as cp

from learnopt.solve.small import solve_small
FEASIBLE = 1e-9        # total slack (relative to the rules' numbers) read as "they all hold"


def _rules(requirements) -> dict[str, list]:
    """Requirements grouped by the rule text they came from, in the user's order."""
    out: dict[str, list] = {}
    for r in requirements:
        out.setdefault(r.source, []).append(r)
    return out


def _smallest_slack(groups: dict[str, list], p: int, movable: list[str] | None):
    """min sum of slacks over the ``movable`` rules (None: every rule) with the others held;
    the slack of each movable rule, or None when the rest cannot hold whatever they move."""
    theta = cp.Variable(p)
    names = list(groups) if movable is None else movable
    s = {name: cp.Variable(nonneg=True) for name in names}
    cons = []
    for name, reqs in groups.items():
        give = s.get(name, 0.0)
        for r in reqs:
            if r.sense == "norm":
                cons.append(cp.norm(r.A @ theta + r.rhs, r.order) + r.f @ theta <= r.bound + give)
            elif r.sense == "==":
                cons += [r.A @ theta - r.rhs <= give, r.rhs - r.A @ theta <= give]
            else:
                cons.append(r.A @ theta <= r.rhs + give)
    objective = cp.sum(cp.hstack(list(s.values()))) if s else cp.Constant(0.0)
    prob = cp.Problem(cp.Minimize(objective), cons)
    linear = all(r.sense != "norm" for reqs in groups.values() for r in reqs)
    if not solve_small(prob, None if linear else 1e-12):
        return None
    return {name: max(float(v.value), 0.0) for name, v in s.items()}


def _size(groups) -> float:
    return max((r.scale() for reqs in groups.values() for r in reqs), default=1.0)


def _conflict(groups, p) -> bool:
    slack = _smallest_slack(groups, p, None)
    return slack is not None and sum(slack.values()) > FEASIBLE * _size(groups)


def conflicts(problem) -> dict[str, float] | None:
    """{rule: the amount that rule alone must move} over an irreducible conflicting set of the
    problem's rules; {} when the rules can all hold; None when the check itself failed."""
    groups = _rules(problem.requirements)
    if not groups:
        return {}
    p = problem.dataset.d + int(problem.intercept)
    total = _smallest_slack(groups, p, None)
    if total is None:
        return None
    if sum(total.values()) <= FEASIBLE * _size(groups):
        return {}
    kept = dict(groups)
    for name in list(groups):                 # the deletion filter
        trial = {k: v for k, v in kept.items() if k != name}
        if trial and _conflict(trial, p):
            kept = trial
    out = {}
    for name in kept:
        alone = _smallest_slack(groups, p, [name])
        out[name] = float(alone[name]) if alone is not None else float("inf")
    return out
