"""Norm rules at their kinks: the certificate confirms right answers and never a wrong one.

Random small tasks are built so that a norm rule binds with some of its coefficients exactly zero
(an l1 ball smaller than the unconstrained fit), or pins coefficients (``abs(x) <= 0``,
``norm2(x, z) <= 0``). Each is solved by every installed conic solver through learnopt and,
independently, in a second formulation (the norm rule written as linear inequalities through
auxiliary variables, pins as equalities) by a different solver at tight tolerance; the
objectives are compared in learnopt's numpy objective. A solver point within 1e-8 of the
independent optimum (in objective and in every coefficient, relative) must be certified; a point more than 2e-7 above it must not be. Every
certificate's dual bound must also lie below the independent optimum (weak duality), also at
deliberately perturbed points. The independent optimum is the outside reference here: the same
problem in another formulation, solved by another solver (common practice).
"""
from __future__ import annotations

import warnings

import cvxpy as cp
import numpy as np
import pytest

import learnopt as lo
from learnopt.problem.algebra import loss_argument, objective
from learnopt.solve.certificate import certify_point

SOLVERS = [s for s in ("clarabel", "ecos", "scs") if s in lo.installed_solvers()]
LOSSES = ("squared", "absolute", "huber")


def _task(seed: int):
    rng = np.random.default_rng(seed)
    n, d = int(rng.integers(30, 70)), int(rng.integers(3, 6))
    X = rng.normal(size=(n, d))
    beta = rng.normal(size=d) * 2
    y = X @ beta + 0.3 * rng.normal(size=n) + 0.5
    loss_name = LOSSES[seed % len(LOSSES)]
    loss = lo.loss.huber(1.0) if loss_name == "huber" else loss_name
    names = [f"x{j}" for j in range(d)]
    kind = seed % 4
    if kind in (0, 1):                       # an l1 ball well inside the unconstrained fit: zeros appear
        members = names if kind == 0 else names[: max(2, d - 1)]
        radius = round(float(rng.uniform(0.15, 0.6)) * float(np.abs(beta[: len(members)]).sum()), 4)
        rule = f"norm1({', '.join(members)}) <= {radius!r}"
        spec = ("norm1", [names.index(m) for m in members], radius)
    elif kind == 2:
        j = int(rng.integers(d))
        rule, spec = f"abs({names[j]}) <= 0", ("pin", [j], 0.0)
    else:
        j, k = rng.choice(d, size=2, replace=False)
        rule, spec = f"norm2({names[j]}, {names[k]}) <= 0", ("pin", [int(j), int(k)], 0.0)
    task = lo.regression(X, y, loss=loss, features=None).require(rule)
    return task, spec


def _independent(task, spec, avoid: str):
    """The optimum in a second formulation, by a solver other than ``avoid``."""
    M, q, a = loss_argument(task)
    M = M.explicit()
    theta = cp.Variable(M.shape[1])
    objective_expr = task.loss.mean_expr(M @ theta - q, a)
    kind, idx, radius = spec
    if kind == "norm1":
        t = cp.Variable(len(idx))
        cons = [t >= theta[idx], t >= -theta[idx], cp.sum(t) <= radius]
    else:
        cons = [theta[idx] == 0]
    prob = cp.Problem(cp.Minimize(objective_expr), cons)
    solver = "ECOS" if avoid == "clarabel" else "CLARABEL"
    opts = ({"abstol": 1e-11, "reltol": 1e-11, "feastol": 1e-11, "max_iters": 500} if solver == "ECOS" else
            {"tol_gap_abs": 1e-12, "tol_gap_rel": 1e-12, "tol_feas": 1e-12})
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        prob.solve(solver=solver, **opts)
    point = np.asarray(theta.value, float)
    return objective(task, point), point


def _check(seeds, reliability):
    counts = {"correct": 0, "certified correct": 0, "wrong": 0, "certified wrong": 0, "perturbed": 0}
    worst_gap = 0.0
    problems = []
    for seed in seeds:
        task, spec = _task(seed)
        optimum = {}
        for solver in SOLVERS:
            # first-order SCS at its usual tolerance: its points are often a little off, which
            # is what the "never certify a wrong point" side needs
            fit = task.solve(solver, fallback=False, tol=1e-9 if solver == "scs" else 1e-10)
            other = "ECOS" if solver == "clarabel" else "CLARABEL"
            if other not in optimum:
                optimum[other] = _independent(task, spec, solver)
            best, point = optimum[other]
            scale = max(1.0, abs(best))
            if fit.certificate is not None and fit.certificate.dual > best + 1e-9 * scale:
                problems.append(f"seed {seed} {solver}: dual bound {fit.certificate.dual!r} above the optimum {best!r}")
            if not np.isfinite(fit.objective):
                continue
            excess = (fit.objective - best) / scale
            distance = float(np.max(np.abs(fit.theta - point))) / max(1.0, float(np.max(np.abs(point))))
            feasible = fit.violation <= 1e-8
            if feasible and excess <= 1e-8 and distance <= 1e-8:
                counts["correct"] += 1
                if fit.status == "optimal":
                    counts["certified correct"] += 1
                    worst_gap = max(worst_gap, fit.rel_gap)
                else:
                    problems.append(f"seed {seed} {solver} {spec[0]} {task.loss.describe()}: a right answer "
                                    f"left {fit.status} ({fit.message})")
                reliability.record("norm rule at a kink", "right answer certified" if fit.status == "optimal"
                                   else "RIGHT ANSWER UNVERIFIED")
            elif excess > 2e-7:
                counts["wrong"] += 1
                counts["certified wrong"] += fit.status == "optimal"
                reliability.record("norm rule at a kink", "WRONG ANSWER MARKED OPTIMAL" if fit.status == "optimal"
                                   else "wrong answer not certified")
            # a deliberately wrong point with the solver's multipliers: the bound must stay valid
            if fit.status == "optimal":
                rng = np.random.default_rng(seed)
                wrong = fit.theta * (1 + 1e-3 * rng.normal(size=fit.theta.size)) + 1e-3 * rng.normal(size=fit.theta.size)
                cert = certify_point(task, wrong, None, fit.extras["multipliers"])
                counts["perturbed"] += 1
                if cert.dual > best + 1e-9 * scale:
                    problems.append(f"seed {seed} {solver}: perturbed point's bound {cert.dual!r} above {best!r}")
                if (objective(task, wrong) - best) / scale > 2e-7:
                    certified = cert.passes(1e-7, 1e-6)
                    counts["certified wrong"] += certified
                    reliability.record("norm rule at a kink", "WRONG ANSWER MARKED OPTIMAL" if certified
                                       else "perturbed wrong point not certified")
    return counts, worst_gap, problems


def test_norm_rules_at_kinks_certify_right_answers_and_no_wrong_ones(reliability):
    counts, worst_gap, problems = _check(range(60), reliability)
    assert not problems, "\n".join(problems[:10])
    assert counts["correct"] >= 100 and counts["certified wrong"] == 0, counts
    assert worst_gap <= 1e-7


@pytest.mark.slow
def test_five_hundred_random_kink_tasks(reliability):
    counts, worst_gap, problems = _check(range(1000, 1500), reliability)
    print(counts, f"worst certified gap {worst_gap:.2e}")
    assert not problems, "\n".join(problems[:10])
    assert counts["certified wrong"] == 0, counts


@pytest.mark.parametrize("rules,reference", [
    # exact constrained least squares by the KKT system (numpy), the rule pinning x1 to zero:
    # the fit equals least squares without that column (common practice)
    (["abs(x1) <= 0"], "drop x1"),
    (["norm2(x1, x2) <= 0"], "drop x1 x2"),
])
def test_pinning_rules_equal_the_fit_without_those_columns(rules, reference):
    rng = np.random.default_rng(11)
    X = rng.normal(size=(50, 3))
    y = X @ [1.0, 2.0, -1.0] + 0.1 * rng.normal(size=50)
    fit = lo.regression(X, y).require(*rules).solve()
    keep = [j for j in range(3) if f"x{j}" not in reference]
    A = np.column_stack([X[:, keep], np.ones(50)])
    ref = np.linalg.lstsq(A, y, rcond=None)[0]
    assert fit.status == "optimal", fit.message
    np.testing.assert_allclose(fit.coef.to_numpy()[keep], ref[:-1], atol=1e-7)
    assert fit.intercept == pytest.approx(ref[-1], abs=1e-7)
