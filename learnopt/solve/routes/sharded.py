"""The sharded route: a task whose rows live on a dask cluster (see :mod:`learnopt.data.sharded`
and :mod:`learnopt.scale`; the functions sent to the blocks are in
:mod:`learnopt.solve.routes.sharded_steps`).

Nothing row-sized ever reaches the client: every step sends a function to the row blocks and
adds up small results. The method follows the loss:

- ``gram`` (squared loss, exact): one pass sums the Gram moments M'AM, M'Ay, y'Ay; the factor
  and the small problem are the compressed route's, with every penalty and coefficient rule.
  When the column-scaled Gram matrix is ill-conditioned a second pass computes a tall-skinny
  QR instead (each block's R, then one QR of the stacked R's: TSQR). The certificate is the
  compressed route's (dual bound on the factor); the objective is recomputed by a pass over
  every row.
- ``newton`` (smooth losses, exact): the newton route, with the gradient, Hessian and every
  objective value of the line search computed as partition-wise sums; the step problem is
  solved on the client.
- ``admm`` (everything else): consensus ADMM (Boyd, Parikh, Chu, Peleato and Eckstein 2011,
  "Distributed optimization and statistical learning via the alternating direction method of
  multipliers", section 7.1 and 8.2): each block solves its share of the loss plus a proximity
  term as a cvxpy problem in a dask task (compiled once per block and worker, then only its
  parameters change); the client solves the consensus step with the penalties and rules and
  keeps the whole state (one p-vector pair per block), so a lost worker only repeats its tasks.
  The penalty parameter rho adapts by residual balancing (section 3.4.1).

For newton and admm the certificate is learnopt's usual one, computed by passes: the loss dual
point (the gradient, or each block's tie duals for admm) stays on the workers, the least-change
repair along the free directions needs only p x p sums, and the bound's terms are sums over rows.
"""
from __future__ import annotations

import sys
import time
import warnings
from dataclasses import replace

import cvxpy as cp
import numpy as np
import pandas as pd

from learnopt.core import checks as params
from learnopt.core.errors import DataError, ParameterError
from learnopt.problem.algebra import requirement_constraint, penalty_value
from learnopt.scale.blocks import Blocks, add_up
from learnopt.scale.cluster import ClusterSettings
from learnopt.scale.partitions import row_requirements
from learnopt.solve.routes import compressed, newton
from learnopt.solve.routes.base import Outcome, RouteSpec, RunnerBase, read_multipliers, run
from learnopt.solve.routes.sharded_steps import (_combine_rows, _local, _loss_sum, _model, _moments, _row_count,
                                                 _row_terms, _trace, _tsqr_block, _weight_sum, certify_sharded,
                                                 outside_support, squared_gram)

METHODS = ("gram", "newton", "admm")


def eligible(task) -> str | None:
    if not task.sharded:
        return "it needs sharded data (a dask DataFrame or a file pattern)"
    return None


def method_for(task) -> str:
    if task.row_rules:
        return "admm"             # rules row by row live in the partitions' own steps
    if compressed.eligible(task) is None:
        return "gram"
    if newton.eligible(task) is None:
        return "newton"
    return "admm"


def Runner(task, vary: int | None = None, cluster: ClusterSettings = ClusterSettings(), **admm_options):
    """The runner for a sharded task (the method follows the loss unless ``cluster.method`` is
    given); ``admm_options`` (rounds, rho, relax) tune consensus ADMM."""
    client, progress, method = cluster.client, cluster.progress, cluster.method
    if vary is not None:
        raise ParameterError("Paths and cross-validation are not available for sharded data; solve one "
                             "strength at a time with task.solve().")
    method = method or method_for(task)
    params.check("ClusterSettings", method=(method, params.OneOf(METHODS)))
    if method != "admm" and task.row_rules:
        raise ParameterError(f"The {method} method cannot apply rules row by row ({task.row_rules[0]!r}); "
                             f"leave the method to learnopt (consensus ADMM applies them in each partition).")
    if method == "admm" and task.loss.argument == "linear":
        raise ParameterError(f"Consensus ADMM on sharded data cannot take the {task.loss.describe()} loss yet"
                             f"{' (rules row by row need it: ' + repr(task.row_rules[0]) + ')' if task.row_rules else ''}; "
                             f"fit it with the newton method (rules on coefficients or on mean predictions), or "
                             f"load the rows into memory.")
    if method == "gram" and compressed.eligible(task) is not None:
        raise ParameterError(f"The gram method {compressed.eligible(task)}.")
    if method == "newton" and newton.eligible(task) is not None:
        raise ParameterError(f"The newton method cannot take this task: {newton.eligible(task)}.")
    t0 = time.perf_counter()
    blocks = Blocks(task.dataset, client)
    report = _Report(progress, blocks)
    runner_class = {"gram": GramRunner, "newton": NewtonRunner, "admm": AdmmRunner}[method]
    runner = runner_class(task, blocks, report, **admm_options)
    runner.build_seconds = time.perf_counter() - t0
    return runner


class _Report:
    """One line per round (stderr), when asked or when stderr is a terminal."""

    def __init__(self, progress: bool | None, blocks: Blocks):
        self.on = sys.stderr.isatty() if progress is None else bool(progress)
        self.blocks = blocks
        self.t0 = time.perf_counter()
        self.lines: list[str] = []

    def __call__(self, text: str) -> None:
        line = (f"[sharded] {time.perf_counter() - self.t0:7.2f}s  passes {self.blocks.passes:4d}  {text}")
        self.lines.append(line)
        if self.on:
            print(line, file=sys.stderr, flush=True)


# ---- functions run on the workers (module level: pickled by reference)

class _Sharded:
    """What the three methods share: the blocks, the per-block arguments, the closing facts."""

    name = "sharded"
    method = "?"

    def _setup(self, task, blocks: Blocks, report: _Report) -> None:
        self.blocks, self.report = blocks, report
        W, n = add_up(blocks.gather(blocks.map(_weight_sum)))
        if not W > 0:
            raise DataError("The weights sum to zero over every partition; at least one row needs a "
                            "positive weight.")
        self.W = W
        self.rows_args = dict(argument=task.loss.argument, intercept=task.intercept, W=W)
        self.common = dict(loss=task.loss, **self.rows_args)

    def loss_sum(self, theta) -> float:
        return self.blocks.total(_loss_sum, theta=np.asarray(theta, float), **self.common)

    def finish(self, best):
        """Add the sharded facts to the fit's extras; let the cluster forget the blocks."""
        facts = {"method": self.method, "partitions": len(self.blocks), "passes": self.blocks.passes,
                 "data_seconds": self.blocks.seconds, "rounds": getattr(self, "rounds", None),
                 "progress": list(self.report.lines)}
        self.blocks.release()
        if best is not None:
            best = replace(best, extras={**best.extras, **facts})
        return best


class GramRunner(_Sharded, compressed.Runner):
    """Squared loss: the Gram moments (or TSQR) by one pass, then the compressed route's problem."""

    method = "gram"

    def __init__(self, task, blocks: Blocks, report: _Report):
        self._setup(task, blocks, report)
        G, c, yay = blocks.total(_moments, intercept=task.intercept, W=self.W)
        report(f"Gram moments summed over {len(blocks)} partitions")

        def tsqr():
            Rs = blocks.gather(blocks.map(_tsqr_block, intercept=task.intercept, W=self.W))
            report("tall-skinny QR (the Gram matrix is ill-conditioned)")
            return compressed.qr_factor(np.linalg.qr(np.vstack(Rs), mode="r"))

        compressed.Runner.__init__(self, task, None, factored=compressed.factor_gram(G, c, yay, tsqr))
        self.rounds = 1

    def primal(self, theta) -> float:
        return self.loss_sum(theta) + penalty_value(self.task, theta)


class NewtonRunner(_Sharded, newton.Runner):
    """Smooth losses: newton steps whose gradient, Hessian and line-search values are row sums."""

    method = "newton"

    def __init__(self, task, blocks: Blocks, report: _Report):
        self._setup(task, blocks, report)
        if task.loss.argument == "linear":
            bad, first = blocks.total(outside_support, loss=task.loss)
            if bad:
                raise DataError(f"The target {task.target_name!r} has {bad} value(s) the {task.loss.describe()} loss "
                                f"cannot fit (the first in a partition at its rows {first}): its targets have to be "
                                f"{task.loss.support}. Drop or correct those rows, or pick a loss for such targets.")
        self.rounds = 0
        newton.Runner.__init__(self, task, None)

    def _rows(self) -> float:
        return self.blocks.total(_trace, **self.rows_args)

    def objective(self, theta):
        return self.loss_sum(theta) + penalty_value(self.task, theta)

    def _model(self, theta):
        self.rounds += 1
        g, H = self.blocks.total(_model, theta=np.asarray(theta, float), **self.common)
        self.report(f"newton step {self.rounds}: |gradient| {np.linalg.norm(g):.3g}")
        return g, H

    def _squared_metric(self):
        return self.blocks.total(squared_gram, **self.common)

    def certify(self, theta, u, mults, enough: float = 0.0):
        return certify_sharded(self.blocks, self.task, theta, mults, self.common, None, enough)


class AdmmRunner(_Sharded, RunnerBase):
    """Consensus ADMM over the blocks; the consensus step (penalties and rules) on the client."""

    method = "admm"
    MAX_ROUNDS = 2000
    CHECK_EVERY = 10          # rounds between certificates once the residuals are small
    # residual balancing: change rho when one residual is this many times the other. Boyd et al.
    # suggest 10; measured to a certified gap: 4 took 148 rounds where 10 took 627 (huber, a rule
    # row by row, 600 rows in 3 partitions) and the same 364 rounds on hinge (8000 rows in 4);
    # 2 took 124 rounds on the first but over 500 on the second
    BALANCE = 4.0

    def __init__(self, task, blocks: Blocks, report: _Report, rounds: int | None = None, rho: float | None = None,
                 relax: float = 1.6):
        self._setup(task, blocks, report)
        self.task, self.vary = task, None
        self.max_rounds = rounds or self.MAX_ROUNDS
        self.relax = relax
        p = task.dataset.d + int(task.intercept)
        self.p, self.K = p, len(blocks)
        self.size = blocks.total(_trace, **self.rows_args) / p
        self.rho0 = rho or max(self.size, 1e-12) / self.K
        # the consensus step: argmin penalties(z) + K rho / 2 |z - v|^2 subject to every rule
        z = cp.Variable(p, name="theta")
        self.c, self.cv = cp.Parameter(nonneg=True), cp.Parameter(p)
        with warnings.catch_warnings():
            warnings.simplefilter("ignore", RuntimeWarning)
            self.pairs = [(r, requirement_constraint(r, z)) for r in task.requirements]
            objective = 0.5 * cp.sum_squares(self.c * z - self.cv) + self.penalties_expr(z[: task.dataset.d])
            self.problem = cp.Problem(cp.Minimize(objective), [c for _, c in self.pairs])
        self.z = z
        self.plain = not task.penalties and not task.requirements
        self.problem_class = task.problem_class()
        self.rounds = 0
        self.u_blocks = self.m_blocks = None
        self.rows = self._row_rules(task) if task.row_rules else [None] * self.K

    def _row_rules(self, task):
        """Each partition compiles the rules row by row for its own rows (kept on the workers)."""
        from dask import delayed
        ds, blocks = task.dataset, self.blocks
        fn = delayed(row_requirements, pure=True)
        rows = blocks.client.compute([fn(part, ds.spec, list(task.row_rules), task.coefficient_names,
                                         task.intercept, k) for k, part in enumerate(ds.source.to_delayed())])
        counts = np.sum(blocks.gather(blocks.client.map(_row_count, rows, pure=False)), axis=0)
        empty = [t for t, c in zip(task.row_rules, counts) if c == 0]
        if empty:
            raise DataError(f"Rule {empty[0]!r}: its condition selects no rows of the data.")
        self.report(f"rules row by row compiled in {len(rows)} partitions ({int(np.sum(counts))} rows)")
        return rows

    def row_terms(self, theta):
        """The rules row by row at theta with the blocks' latest multipliers (None without such rules)."""
        if not self.task.row_rules or self.m_blocks is None:
            return None
        futs = self.blocks.client.map(_row_terms, self.rows, self.m_blocks, theta=np.asarray(theta, float),
                                      feas_tol=self.settings.feas_tol, pure=False)
        return _combine_rows(self.blocks.gather(futs))

    def _consensus(self, v, rho, spec, options):
        if self.plain:
            return v.copy(), []
        scale = np.sqrt(self.K * rho)
        self.c.value, self.cv.value = float(scale), scale * v
        status, *_ = run(self.problem, spec, options, False, warm=self.rounds > 1)
        if self.z.value is None:
            raise cp.error.SolverError(f"the consensus step ended with status {status}")
        return np.asarray(self.z.value, float).copy(), read_multipliers(self.pairs)

    def run(self, spec, options: dict, verbose: bool, warm: bool = False) -> Outcome:
        blocks, K, p = self.blocks, self.K, self.p
        t_run = time.perf_counter()
        token = f"{id(self)}-{time.time_ns()}"
        keys = [(token, k) for k in range(K)]
        local = {"solver": "CLARABEL", "tol_gap_abs": 1e-12, "tol_gap_rel": 1e-12, "tol_feas": 1e-12,
                 "max_iter": 500}
        rho = self.rho0
        z = np.zeros(p) if self.start is None else np.asarray(self.start, float).copy()
        x = np.tile(z, (K, 1))
        u = np.zeros((K, p))                      # scaled duals, one row per block
        # (a start from the smoothed task's optimum was tried: with the duals set from its
        # gradient it cut the rounds by half on some data and multiplied them by 30 on other
        # data; without them it added rounds. Zero is the robust start.)
        mults = [np.zeros(r.rows) if r.sense != "norm" else 0.0 for r in self.task.requirements]
        eps = max(min(self.settings.tol, 1e-6), 1e-12)
        status, goal_s = "iteration limit", 0.0
        next_check = 1
        for rnd in range(1, self.max_rounds + 1):
            self.rounds = rnd
            c = np.sqrt(rho)
            futs = blocks.map(_local, keys, [None if rnd == 1 else (x[k],) for k in range(K)],
                              [c * (z - u[k]) for k in range(K)], self.rows, c=c, settings=local,
                              **self.common)
            xs = blocks.gather(blocks.pick(futs, 0))
            self.u_blocks = blocks.pick(futs, 1)   # the blocks' loss dual points, for the certificate
            self.m_blocks = blocks.pick(futs, 2)   # ... and their rules' multipliers
            x = np.vstack(xs)
            xr = self.relax * x + (1 - self.relax) * z          # over-relaxation (section 3.4.3)
            z_old = z
            z, m = self._consensus((xr + u).mean(axis=0), rho, spec, options)
            if m:
                mults = m
            u = u + xr - z
            r = float(np.sqrt(((x - z) ** 2).sum()))
            s = float(rho * np.sqrt(K) * np.linalg.norm(z - z_old))
            scale = max(np.sqrt(K) * np.linalg.norm(z), np.linalg.norm(x), 1e-300)
            self.report(f"admm round {rnd}: primal residual {r:.3g}, dual residual {s:.3g}, rho {rho:.3g}")
            small = r <= eps * scale and s <= eps * max(rho * np.linalg.norm(u), 1e-300)
            if self.goal is not None and (small or rnd >= next_check):
                t_goal = time.perf_counter()
                reached = self.goal(z, None, mults)
                goal_s += time.perf_counter() - t_goal
                cert = self.last_certificate
                if cert is not None:
                    self.report(f"certificate at round {rnd}: relative gap {cert.rel_gap:.3g}, "
                                f"relative violation {cert.rel_violation:.3g}")
                if reached:
                    status = "optimal"
                    break
                next_check = rnd + max(self.CHECK_EVERY, rnd // 5)   # checks cost passes: space them out
            elif self.goal is None and small:
                status = "optimal"
                break
            # residual balancing (section 3.4.1): keep the two residuals within a factor BALANCE
            if r > self.BALANCE * s:
                rho, u = rho * 2, u / 2
            elif s > self.BALANCE * r:
                rho, u = rho / 2, u * 2
        solve_s = time.perf_counter() - t_run - goal_s
        return Outcome(status if status == "optimal" else "optimal_inaccurate", z, None, mults, 0.0, solve_s,
                       self.rounds, note=f"consensus ADMM, {self.rounds} rounds", solved_by=None)

    def certify(self, theta, u, mults, enough: float = 0.0):
        return certify_sharded(self.blocks, self.task, theta, mults, self.common, self.u_blocks, enough,
                               row_terms=self.row_terms(theta))

    def finish(self, best):
        if best is not None and self.task.row_rules:
            terms = self.row_terms(best.theta)
            if terms is not None:
                noise = 1e-2 * self.settings.gap_tol * max(1.0, abs(best.certificate.primal))
                extra_p = pd.Series(np.where(np.abs(terms[5]) <= noise, 0.0, terms[5]), index=list(self.task.row_rules))
                extra_b = pd.Series(terms[6] > 0, index=list(self.task.row_rules))
                best = replace(best, prices=pd.concat([best.prices, extra_p]),
                               binding=pd.concat([best.binding, extra_b]))
        return super().finish(best)


ROUTE = RouteSpec("sharded", "data on a dask cluster: Gram/TSQR, Newton passes or consensus ADMM", eligible, Runner,
                  automatic=False)
