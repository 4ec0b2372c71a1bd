"""A smaller task's answer taken as the whole task's fit, once learnopt's certificate on every
row of the whole task confirms it (used where rows are screened or gathered)."""
from __future__ import annotations

from dataclasses import replace

from learnopt.solve.certificate import certify_point
from learnopt.solve.loop import _prices


def whole_task_fit(task, fit, mults, settings, how: str, extra: dict, seconds: float):
    """``fit`` (of a smaller task) as the fit of ``task``, with ``mults`` the multipliers of
    ``task``'s own requirements; None when the certificate on every row does not confirm it.
    ``how`` says in words how the smaller task was made; ``extra`` is added to ``fit.extras``."""
    problem = task.as_problem()
    theta = fit.theta
    cert = certify_point(problem, theta, None, mults, enough=1e-3 * settings.gap_tol)
    if not cert.passes(settings.gap_tol, settings.feas_tol):
        return None
    noise = settings.gap_tol * max(1.0, abs(cert.primal)) * 1e-2
    prices, binding = _prices(problem, mults, theta, settings.feas_tol, noise)
    message = (f"certified: relative gap {cert.rel_gap:.2g} <= {settings.gap_tol:g}, worst relative violation "
               f"{cert.rel_violation:.2g} <= {settings.feas_tol:g}. {how}; the certificate checks every row.")
    return replace(fit, task=task, message=message, objective=cert.primal, gap=cert.gap, rel_gap=cert.rel_gap,
                   violation=cert.violation, prices=prices, binding=binding, certificate=cert,
                   timings=replace(fit.timings, total=seconds), extras={**fit.extras, "multipliers": mults, **extra})
