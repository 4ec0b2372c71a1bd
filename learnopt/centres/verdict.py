"""``CentresTask.check()``: what learnopt will solve, whether each centre has somewhere to go,
and what in the points deserves a look, without placing anything.

Placing centres is not convex as a whole (each point takes the nearest of k centres), so the
verdict does not say "convex"; it says whether the task is *ready*: every step learnopt takes is
convex and solved exactly, and every movable centre's rules leave an allowed place (checked by
projecting one point onto each centre's allowed set).
"""
from __future__ import annotations

from dataclasses import dataclass, field

import numpy as np

from learnopt.core.errors import LearnoptError
from learnopt.terms.convexity import verdict_text

SPREAD = 100.0       # coordinates whose spreads differ by more than this factor get a note


@dataclass
class PlacementVerdict:
    """Result of ``CentresTask.check()``: ready or not, the pieces, reasons and data findings."""

    ready: bool
    pieces: list[tuple[str, str]] = field(default_factory=list)
    reasons: list[str] = field(default_factory=list)
    data: list[str] = field(default_factory=list)
    convex: bool = False                 # the placement as a whole never is (see the module text)
    problem_class: str = "alternating exact steps (local optimum)"

    def __bool__(self) -> bool:
        return self.ready

    def __str__(self) -> str:
        head = "ready" if self.ready else "NOT ready"
        return verdict_text(f"{head} (placing centres: {self.problem_class})", self.pieces, self.reasons, self.data)

    __repr__ = __str__

    def as_dict(self) -> dict:
        return {"ready": self.ready, "convex": self.convex, "problem_class": self.problem_class,
                "pieces": [list(p) for p in self.pieces], "reasons": self.reasons, "data": self.data}


def _fact(req) -> str:
    if req.sense == "norm":
        return f"within a distance (order-{req.order:g} norm): a convex set"
    kind = "equality" if req.sense == "==" else "inequality"
    return f"linear {kind} ({req.rows} row{'s' * (req.rows > 1)}): a convex set"


def examine(task, reqs, movable, project) -> PlacementVerdict:
    """The verdict for ``task``, given its per-centre requirements and projections."""
    pieces = [("assignment step", "each point goes to its nearest centre (exact)"),
              ("centre step", "each centre moves to the projection of its cluster's weighted mean onto its "
                              "allowed set (a convex problem, solved exactly)"),
              ("the placement as a whole", "not convex (each point takes the nearest of k centres): the answer is "
                                           "a local optimum; restarts look for better ones")]
    for p in task.rules:
        where = f"centre {p.centre}" if p.centre is not None else "every centre"
        facts = sorted({_fact(r) for r in p.spec.compile(task.context())})
        pieces.append((f"rule «{p.spec.text}» on {where}", "; ".join(facts)))
    reasons = []
    probe = _probe(task)
    for j in np.flatnonzero(movable):
        if not reqs[j]:
            continue
        try:
            place = project[j](probe)
        except LearnoptError:
            rules = sorted({r.source for r in reqs[j]})
            reasons.append(f"centre {j + 1}: its rules leave no allowed place ({'; '.join(rules)}); "
                           f"relax one of them or apply them to fewer centres")
            continue
        worst = max(r.violation(place) for r in reqs[j])
        if worst > 1e-6 * max(1.0, float(np.abs(place).max())):
            reasons.append(f"centre {j + 1}: its rules could only be met to within {worst:.3g}; check them "
                           f"for near-conflicts")
    return PlacementVerdict(not reasons, pieces, reasons, _findings(task, reqs, movable))


def _probe(task) -> np.ndarray:
    """A point to project: the weighted mean of the points (the origin for sharded data)."""
    if len(task.X) == 0:
        return np.zeros(len(task.names))
    return task.weights @ task.X / task.weights.sum()


def _findings(task, reqs, movable) -> list[str]:
    notes = []
    for j, c in enumerate(task.fixed):
        broken = sorted({r.source for r in reqs[j] if r.violation(np.asarray(c)) > 1e-9 * max(1.0, np.abs(c).max())})
        if broken:
            notes.append(f"fixed centre {j + 1} at {tuple(c)} breaks {'; '.join(broken)}; fixed centres stay where "
                         f"they are, rules or not")
    if len(task.X) == 0:
        return notes + ["sharded points: the data findings need one pass over the data and are left to solve()"]
    X, w = task.X, task.weights
    live = X[w > 0]
    distinct = len(np.unique(live, axis=0))
    if distinct < task.k:
        notes.append(f"only {distinct} distinct point(s) with positive weight for k = {task.k} centres: some "
                     f"centres will share a place or serve nobody")
    spread = X.max(axis=0) - X.min(axis=0)
    for name, s in zip(task.names, spread):
        if s == 0:
            notes.append(f"coordinate {name!r} is the same for every point; it adds nothing to the distances")
    moving = spread[spread > 0]
    if moving.size > 1 and moving.max() > SPREAD * moving.min():
        big, small = task.names[int(np.argmax(spread))], task.names[int(np.argmin(np.where(spread > 0, spread, np.inf)))]
        notes.append(f"coordinate {big!r} spans {spread.max():.3g} while {small!r} spans {moving.min():.3g}: "
                     f"squared distances are dominated by {big!r}; rescale if the units are not comparable")
    zero = int(np.sum(w == 0))
    if zero:
        notes.append(f"{zero} point(s) have weight 0 and do not pull any centre")
    return notes
