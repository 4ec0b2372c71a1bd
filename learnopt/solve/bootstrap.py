"""How much the fit would move with other data: refits on resampled rows, every rule re-applied.

Method (Efron and Tibshirani 1993, "An Introduction to the Bootstrap", ch. 6 and 13; pairs
resampling for regression, ch. 9): draw the training rows with replacement, rebuild the task
on the draw (rules on predictions compiled again on the drawn rows, so a rule means on each draw
what it meant on the data), solve it and certify it; repeat. Percentile intervals are read from
the certified refits only; refits the certificate does not confirm are counted and left out.

- ``rows`` (the default): n rows drawn uniformly; with row weights, drawn with probability
  proportional to weight and refitted with unit weights (a weight is a count of copies).
- ``groups``: whole groups drawn with replacement (rows of one group move together), for
  rows that are not independent within a group (a store's weeks, a customer's visits).

Where a coefficient sits on the edge of what the rules allow (or at exactly zero under an l1
type penalty) in a sizeable share of refits, its distribution piles up at that edge: the interval
is flagged, and intervals from normal theory (estimate +/- z * standard error) do not apply
there (Andrews 2000, "Inconsistency of the bootstrap when a parameter is on the boundary of the
parameter space"). No p-values are given for constrained or penalised fits.
"""
from __future__ import annotations

import time
from dataclasses import dataclass, field

import numpy as np
import pandas as pd

from learnopt.core import checks as params
from learnopt.core.files import json_ready
from learnopt.core.errors import DataError, LearnoptError
from learnopt.core.status import CAUTION, Status
from learnopt.data.table import new_design
from learnopt.rules.objects import compile_all
from learnopt.rules.requirements import Context
from learnopt.solve.subsets import solve_on_rows

EDGE_SHARE = 0.05   # a coefficient on an edge in at least this share of refits is flagged
ZERO_CUT = 1e-8     # |w_j| <= ZERO_CUT * max(1, max |w|) counts as exactly zero
METHODS = ("rows", "groups")
PARALLEL_AFTER = 4.0   # seconds the refits would take in one process before jobs=None uses every core


@dataclass(frozen=True, eq=False)
class Bootstrap:
    """Refits on resampled rows and what they say about the fit.

    Attributes
    ----------
    method : "rows", "weighted rows" or "groups" (how the rows were drawn).
    level : the intervals' coverage level (0.9: from the 5th to the 95th percentile).
    draws : one row per refit, one column per coefficient (the intercept last); NaN for a refit
        without a point.
    statuses : the status of each refit (only "optimal" refits count in the intervals).
    intervals : per coefficient: estimate (the full fit), low, high (percentile interval over
        the certified refits), zero_share (share exactly zero), edge_share (share at which a rule
        on this coefficient holds with equality) and flagged (on an edge or at zero in at least
        5% of refits: normal-theory intervals do not apply there).
    rules : per rule as written: binding_share (share of certified refits in which it holds
        with equality) and absent (refits whose drawn rows gave the rule no rows to hold on).
    seconds : wall time of the refits; fit_seconds : the full fit's own time, for comparison.
    """

    method: str
    level: float
    seed: int
    draws: pd.DataFrame
    statuses: pd.Series
    intervals: pd.DataFrame
    rules: pd.DataFrame
    seconds: float
    fit_seconds: float
    fit: object = field(repr=False, default=None)

    @property
    def n(self) -> int:
        return len(self.draws)

    @property
    def certified(self) -> int:
        return int(np.sum(self.statuses == Status.OPTIMAL.value))

    def _good(self) -> np.ndarray:
        return self.draws.to_numpy()[(self.statuses == Status.OPTIMAL.value).to_numpy()]

    def predictions(self, data, level: float | None = None) -> pd.DataFrame:
        """Percentile intervals for predictions (scores X w + b) at the rows of ``data``:
        columns prediction (the full fit), low and high, one row per row of ``data``."""
        level = self.level if level is None else level
        params.check("predictions", level=(level, params.OPEN_UNIT))
        task = self.fit.task
        X = new_design(task.dataset, data)
        good = self._good()
        if not len(good):
            raise DataError("predictions(): no refit was certified, so there is nothing to read intervals from; "
                            "see the statuses of the refits.")
        W = good[:, : task.dataset.d]
        b = good[:, -1] if task.intercept else np.zeros(len(good))
        scores = np.asarray(X @ W.T) + b
        low, high = np.quantile(scores, [(1 - level) / 2, (1 + level) / 2], axis=1)
        index = data.index if isinstance(data, pd.DataFrame) else pd.RangeIndex(X.shape[0])
        full = np.asarray(X @ self.fit.coef.to_numpy()).ravel() + self.fit.intercept
        return pd.DataFrame({"prediction": full, "low": low, "high": high}, index=index)

    def to_dict(self) -> dict:
        """Plain data for JSON: the settings, counts, intervals and rule shares."""
        def rows(frame):
            return json_ready(frame.to_dict(orient="index"))
        return {"method": self.method, "level": self.level, "seed": self.seed, "refits": self.n,
                "certified": self.certified, "seconds": self.seconds, "fit_seconds": self.fit_seconds, "not_certified": self.n - self.certified,
                "intervals": rows(self.intervals), "rules": rows(self.rules), "caution": self.caution()}

    def caution(self) -> str:
        flagged = [str(k) for k in self.intervals.index[self.intervals["flagged"]]]
        said = (f" {', '.join(flagged)} sit{'s' if len(flagged) == 1 else ''} on an edge of the rules or at "
                f"zero in at least {EDGE_SHARE:.0%} of refits: read those intervals as the spread of refits, not "
                f"as estimate plus or minus a standard error (which does not apply there)." if flagged else "")
        return (f"Percentile intervals from {self.certified} certified refits on rows drawn with replacement; "
                f"they assume the rows{' (groups)' if self.method == 'groups' else ''} are independent draws."
                f"{said} No p-values are given for a fit with rules or penalties. {CAUTION}")

    def summary(self) -> str:
        shown = self.intervals.copy()
        shown["flagged"] = np.where(shown["flagged"], "on an edge", "")
        lines = [f"bootstrap  {self.n} refits ({self.method}, seed {self.seed}), {self.certified} certified, "
                 f"{self.seconds:.2f} s ({self.seconds / max(self.fit_seconds, 1e-9):.0f} times the fit)",
                 f"{self.level:.0%} percentile intervals:",
                 shown.to_string(float_format=lambda v: f"{v:.4g}")]
        if len(self.rules):
            lines += ["share of refits in which each rule holds with equality:",
                      self.rules.to_string(float_format=lambda v: f"{v:.3g}")]
        lines.append(self.caution())
        return "\n".join(lines)

    def __repr__(self) -> str:
        return (f"Bootstrap({self.n} refits, method={self.method!r}, level={self.level:g}, "
                f"certified={self.certified})")


# ---------------------------------------------------------------- drawing rows
def draw_rows(ds, n: int, seed: int, groups=None) -> tuple[str, list[np.ndarray]]:
    """The method's name and ``n`` arrays of row indices, each one resample."""
    rng = np.random.default_rng(seed)
    rows = ds.n
    if groups is not None:
        codes, _ = pd.factorize(pd.Series(groups), sort=True)
        members = [np.flatnonzero(codes == g) for g in range(codes.max() + 1)]
        picks = rng.integers(0, len(members), size=(n, len(members)))
        return "groups", [np.concatenate([members[g] for g in pick]) for pick in picks]
    w = np.asarray(ds.weights, float)
    if np.allclose(w, w[0]):
        return "rows", list(rng.integers(0, rows, size=(n, rows)))
    return "weighted rows", list(rng.choice(rows, size=(n, rows), p=w / w.sum()))


def _group_labels(ds, groups):
    if isinstance(groups, str):
        if ds.frame is None or groups not in ds.frame.columns:
            known = [] if ds.frame is None else list(ds.frame.columns)
            raise DataError(f"bootstrap(groups={groups!r}): the training data has no column {groups!r}"
                            f"{params.nearest(groups, known)}; give a column name or one label per row.")
        values = ds.frame[groups].to_numpy()
    else:
        values = np.asarray(groups).ravel()
    if len(values) != ds.n:
        raise DataError(f"bootstrap(groups=...): {len(values)} labels for the {ds.n} training rows; give one "
                        f"label per row, or a column name.")
    if pd.isna(values).any():
        raise DataError("bootstrap(groups=...): some rows have no group label; fill them or drop those rows.")
    if len(np.unique(values.astype(str))) < 2:
        raise DataError("bootstrap(groups=...): the rows form a single group; resampling groups needs at least two "
                        "(and many more for useful intervals).")
    return values


# ---------------------------------------------------------------- one refit
# ---------------------------------------------------------------- the verb
def bootstrap(fit, n: int = 200, *, seed: int = 0, method: str | None = None, groups=None,
              level: float = 0.9, jobs: int | None = None, progress: bool | None = None,
              tol: float = 1e-9, gap_tol: float = 1e-7, feas_tol: float = 1e-6) -> Bootstrap:
    """Refit ``n`` times on resampled rows; see the module docstring and :class:`Bootstrap`."""
    params.check("bootstrap", n=(n, params.Interval(2, None)), level=(level, params.OPEN_UNIT))
    if int(n) != n:
        raise params.refusal("bootstrap", "n", n, "a whole number of refits, such as 200")
    if jobs is not None and (int(jobs) != jobs or not (jobs == -1 or jobs >= 1)):
        raise params.refusal("bootstrap", "jobs", jobs, "a whole number of processes, at least 1 (-1: one per core)")
    if method is not None and method not in METHODS:
        raise params.refusal("bootstrap", "method", method,
                             f"one of {', '.join(map(repr, METHODS))}{params.nearest(str(method), METHODS, show=repr)}")
    if method == "groups" and groups is None:
        raise params.refusal("bootstrap", "groups", groups, "a column name or one label per row when "
                             "method='groups' (the rows of one group are drawn together)")
    if method == "rows" and groups is not None:
        raise params.refusal("bootstrap", "method", method, "'groups' (or left out) when groups= is given")
    task = fit.task
    _refitable(fit)
    ds = task.dataset
    labels = _group_labels(ds, groups) if groups is not None else None
    how, draws = draw_rows(ds, int(n), int(seed), labels)
    options = dict(tol=tol, gap_tol=gap_tol, feas_tol=feas_tol, start=fit.theta)   # each refit warm-starts
    unit = how == "weighted rows"
    if jobs is None:      # worker processes pay for themselves only when the refits take a while
        jobs = -1 if n * float(fit.timings.total) > PARALLEL_AFTER else 1
    t0 = time.perf_counter()
    results = solve_on_rows(task, draws, unit, options, int(jobs), progress, "bootstrap refits")
    seconds = time.perf_counter() - t0
    return _collect(fit, results, how, float(level), int(seed), seconds, feas_tol)


def _refitable(fit) -> None:
    task = fit.task
    if task is None or getattr(task, "dataset", None) is None or getattr(task.dataset, "X", None) is None \
            or not hasattr(task, "solve") or not task.dataset.n:
        raise DataError("bootstrap(): this fit holds no training rows (it was read from a model file); "
                        "build the task on the training data and solve it, then call bootstrap() on that fit.")
    if task.sharded:
        raise DataError("bootstrap(): this task's data is sharded; resampling rows across partitions is not "
                        "available yet. Load a sample into a pandas DataFrame, or fit in memory.")
    if not fit.status.has_point:
        raise DataError(f"bootstrap(): the fit has status {fit.status.value!r} and no point to compare refits "
                        f"with: {fit.message}")


def _collect(fit, results, how, level, seed, seconds, feas_tol) -> Bootstrap:
    task = fit.task
    names = list(task.coefficient_names)
    p = len(names)
    draws = np.full((len(results), p), np.nan)
    for k, r in enumerate(results):
        if r["theta"] is not None:
            draws[k] = r["theta"]
    statuses = pd.Series([r["status"] for r in results], name="status")
    good = (statuses == Status.OPTIMAL.value).to_numpy()
    G = draws[good]
    est = fit.theta
    if len(G):
        low, high = np.quantile(G, [(1 - level) / 2, (1 + level) / 2], axis=0)
        d = task.dataset.d
        scale = np.maximum(1.0, np.max(np.abs(G[:, :d]), axis=1, initial=0.0))
        zero = np.mean(np.abs(G) <= ZERO_CUT * scale[:, None], axis=0)
        if task.intercept:
            zero[-1] = 0.0                      # the intercept is never penalised
        edge = _edge_share(task, G, feas_tol)
    else:
        low = high = zero = edge = np.full(p, np.nan)
    flagged = (np.nan_to_num(zero) >= EDGE_SHARE) | (np.nan_to_num(edge) >= EDGE_SHARE)
    intervals = pd.DataFrame({"estimate": est, "low": low, "high": high, "zero_share": zero,
                              "edge_share": edge, "flagged": flagged}, index=pd.Index(names, name="name"))
    texts = [spec.text for spec in task.rules]
    certified = [r for r, g in zip(results, good) if g]
    share = [np.mean([bool(r["binding"].get(t, False)) for r in certified]) if certified else np.nan for t in texts]
    absent = [sum(t in r["absent"] for r in results) for t in texts]
    rules = pd.DataFrame({"binding_share": share, "absent": absent}, index=pd.Index(texts, name="rule"))
    return Bootstrap(method=how, level=level, seed=seed, draws=pd.DataFrame(draws, columns=names),
                     statuses=statuses, intervals=intervals, rules=rules, seconds=seconds,
                     fit_seconds=float(fit.timings.total), fit=fit)


def _edge_share(task, G: np.ndarray, feas_tol: float) -> np.ndarray:
    """Per coefficient, the share of refits in which a rule on coefficients alone (one that needs
    no data rows) holds with equality on a row involving that coefficient."""
    enc = task.dataset.encoding
    reference, former = (enc.reference_names, enc.former_names) if enc is not None else ((), {})
    bare = Context(task.coefficient_names, None, None, reference, former, no_rows="coefficients only")
    at_edge = np.zeros(G.shape, dtype=bool)
    for spec in task.rules:
        try:
            reqs = compile_all([spec], bare)
        except LearnoptError:
            continue                            # a rule on predictions: its rows come from data
        for r in reqs:
            if r.sense != "<=":
                continue                        # an equality holds in every refit: no edge, a surface
            slack = r.rhs - G @ r.A.T
            tight = slack <= feas_tol * r.scale() * 10      # (refits x rows)
            involved = r.A != 0                             # (rows x p)
            at_edge |= (tight.astype(float) @ involved.astype(float)) > 0
    return at_edge.mean(axis=0)
