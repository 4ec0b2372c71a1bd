"""Routes: how a task is solved. The planner names the route in every fit.

Only the ``direct`` route exists so far: one vectorised cvxpy problem handed to an open solver.
"""
from __future__ import annotations

from ..errors import ParameterError

ROUTES = ("direct",)


def plan(task, route: str | None) -> str:
    """Pick the route for a task (or check the one asked for)."""
    if route is None:
        return "direct"
    if route not in ROUTES:
        raise ParameterError(f"The 'route' parameter of solve must be one of {', '.join(ROUTES)}. "
                             f"Got {route!r} instead.")
    return route
