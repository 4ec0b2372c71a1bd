"""Routes: how a problem is solved. The planner picks one and names it in every fit.

Every route module declares one :class:`~learnopt.solve.routes.base.RouteSpec` (``ROUTE``):
its name, when it can take a problem (``eligible(problem) -> None or the reason why not``),
how to build its runner, and whether the planner may pick it on its own. The registry below
is made of those rows, in the planner's order of preference.

- direct: one vectorised cvxpy problem; takes every problem.
- compressed: squared loss; X reduced exactly to a p x p factor, then a small problem.
- newton: smooth losses; proximal Newton steps, each a small p-dim problem, line search.
- working-set: piecewise-linear losses; solve on the rows near a kink, fold the rest exactly.
- sharded: data on a dask cluster; exact partition-wise reductions for the squared loss
  (Gram / TSQR) and smooth losses (Newton), consensus ADMM otherwise.
"""
from __future__ import annotations

from learnopt.core import checks as params
from learnopt.core.errors import ParameterError, TooLargeError
from learnopt.solve.routes import compressed, direct, newton, sharded, working_set
from learnopt.solve.routes.base import RouteSpec, RunnerBase

REGISTRY: dict[str, RouteSpec] = {m.ROUTE.name: m.ROUTE for m in (direct, compressed, newton, working_set, sharded)}
ROUTES = tuple(REGISTRY)

DENSE_LIMIT = 2000   # largest p for routes that form dense p x p matrices (Gram, Hessian)


def lookup(name: str) -> RouteSpec:
    """The registry row of a route, or a ParameterError listing the routes."""
    params.check("solve", route=(name, params.OneOf(ROUTES)))
    return REGISTRY[name]


def eligible_routes(problem, *, but: str | None = None) -> tuple[str, ...]:
    """Names of the routes that can take ``problem`` (except ``but``)."""
    return tuple(name for name, spec in REGISTRY.items() if name != but and spec.eligible(problem) is None)


def plan(problem, route: str | None) -> str:
    """Pick the route for a problem (or check that the one asked for can take it)."""
    if problem.sharded:
        if route not in (None, "sharded"):
            raise ParameterError(f"This task's data is sharded ({problem.dataset.label}); only the sharded route "
                                 f"can solve it. Leave route=None.")
        return "sharded"
    if route is None:
        return _auto(problem)
    why = lookup(route).eligible(problem)
    if why:
        raise ParameterError(f"The {route} route cannot solve this task: {why}. "
                             f"Leave route=None to let learnopt choose.")
    return route


def prepare(problem, route: str | None, vary: int | None = None, **route_options) -> RunnerBase:
    """The runner of the planned route, built once for every solver attempt (and, with
    ``vary``, for every strength of penalty ``vary`` along a path). ``route_options`` go to
    routes that take them (sharded: cluster)."""
    name = plan(problem, route)
    try:
        return REGISTRY[name].runner(problem, vary=vary, **route_options)
    except TooLargeError as exc:
        others = eligible_routes(problem, but=name)
        how = (f"use route={others[0]!r} (it never compiles the whole design)" if others else
               "sample rows, or shard the data across machines")
        raise TooLargeError(f"{exc}; {how}.") from None


def _auto(problem) -> str:
    """The planner: the first automatic route that exploits the problem's structure, else direct."""
    n, p = problem.dataset.n, problem.dataset.d + int(problem.intercept)
    if p > DENSE_LIMIT:
        return "direct"          # p x p dense factors would dwarf a sparse n x p design
    for spec in REGISTRY.values():
        if spec.automatic and spec.name != "direct" and spec.eligible(problem) is None \
                and spec.worth(n, p):
            return spec.name
    return "direct"
