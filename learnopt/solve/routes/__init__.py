"""Routes: how a task is solved. The planner picks one and names it in every fit.

Each route module has ``eligible(task) -> str | None`` (None, or why the route cannot take
the task) and a ``Runner(task)`` with ``name``, ``build_seconds``, ``problem_class`` and
``run(spec, options, verbose, warm) -> Outcome``.

- direct: one vectorised cvxpy problem; takes every task.
- compressed: squared loss; X reduced exactly to a p x p factor, then a small problem.
- newton: smooth losses; proximal Newton steps, each a small p-dim problem, line search.
- working-set: piecewise-linear losses; solve on the rows near a kink, fold the rest exactly.
- sharded: data on a dask cluster (learnopt.shards); exact partition-wise reductions for the
  squared loss (Gram / TSQR) and smooth losses (Newton), consensus ADMM otherwise.
"""
from __future__ import annotations

import importlib

from learnopt.core.errors import ParameterError

ROUTES = ("direct", "compressed", "newton", "working-set", "sharded")


def _module(name: str):
    return importlib.import_module(f"{__name__}.{name.replace('-', '_')}")


def plan(task, route: str | None) -> str:
    """Pick the route for a task (or check that the one asked for can take it)."""
    if getattr(task, "sharded", False):
        if route not in (None, "sharded"):
            raise ParameterError(f"This task's data is sharded ({task.dataset.label}); only the sharded route "
                                 f"can solve it. Leave route=None.")
        return "sharded"
    if route is None:
        return _auto(task)
    if route not in ROUTES:
        raise ParameterError(f"The 'route' parameter of solve must be one of {', '.join(ROUTES)}. "
                             f"Got {route!r} instead.")
    why = _module(route).eligible(task)
    if why:
        raise ParameterError(f"The {route} route cannot solve this task: {why}. "
                             f"Leave route=None to let learnopt choose.")
    return route


def prepare(task, route: str | None, vary: int | None = None, **route_options):
    """The runner of the planned route, built once for every solver attempt (and, with
    ``vary``, for every strength of penalty ``vary`` along a path). ``route_options`` go to
    routes that take them (sharded: client, progress)."""
    return _module(plan(task, route)).Runner(task, vary=vary, **route_options)


DENSE_LIMIT = 2000   # largest p for routes that form dense p x p matrices (Gram, Hessian)


def _auto(task) -> str:
    """The planner: the route that exploits the task's structure, else direct."""
    n, p = task.dataset.n, task.dataset.d + int(task.intercept)
    if p > DENSE_LIMIT:
        return "direct"          # p x p dense factors would dwarf a sparse n x p design
    if _module("compressed").eligible(task) is None and n > p:
        return "compressed"
    if _module("newton").eligible(task) is None:
        return "newton"          # p x p steps whatever n is
    ws = _module("working-set")
    if ws.eligible(task) is None and n >= 4 * ws._size(n, p):
        return "working-set"
    return "direct"
