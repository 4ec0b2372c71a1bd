"""A task with several classes as a value, and as one cvxpy program.

Row i gets one score per class, ``z_ik = x_i'w_k + b_k``; the objective is

    sum_i a_i f(z_i; y_i) + sum over penalties R(W)          a_i = weight_i / sum(weights)

with f a loss of :mod:`learnopt.terms.class_losses`. Adding the same vector to every class's
coefficients leaves every score difference, so the loss, unchanged: the coefficients are
identified in one of two ways (say which with ``reference=``):

* sum to zero (default): for each coefficient no penalty acts on (the intercept; every feature
  of an unpenalised fit), the K classes' values sum to zero. Penalised coefficients are pinned
  down by the penalty itself (an l2 penalty makes them sum to zero too, so an l2 fit is the
  symmetric fit other libraries return).
* a reference class: its coefficients and intercept are 0 and the other classes' scores are log
  odds against it (for the multinomial loss), as in a textbook multinomial logit.

The coefficients live in one flat vector ``theta = (w_1, ..., w_C, b_1, ..., b_C)`` over the C
classes that carry coefficients (all K, or K-1 beside a reference), ``w_k`` in feature order;
rules and penalties are written over it (:func:`learnopt.terms.across.flat_names`).
"""
from __future__ import annotations

import time
import warnings
from dataclasses import dataclass, field, replace

import cvxpy as cp
import numpy as np
import scipy.sparse as sp

from learnopt.data.table import design_with_ones
from learnopt.problem.algebra import requirement_constraint
from learnopt.rules.requirements import Context, Requirement, RuleSpec
from learnopt.terms.across import flat_names, per_class
from learnopt.terms.class_losses import ClassLoss, MulticlassHinge, one_hot
from learnopt.terms.cones import problem_class


@dataclass(frozen=True)
class ClassRule:
    """A rule as the user wrote it and the class it is for (None: every class carrying coefficients)."""

    spec: RuleSpec
    label: object = None

    @property
    def text(self) -> str:
        return self.spec.text if self.label is None else f"{self.spec.text} for class {self.label!r}"


@dataclass(frozen=True, eq=False)
class ClassesProblem:
    """Data (``dataset.y`` holds class numbers into ``dataset.labels``), loss, penalties, rules."""

    dataset: object
    loss: ClassLoss
    intercept: bool
    target_name: object
    reference: object = None                      # a label, or None: sum-to-zero identification
    penalties: tuple = ()
    rules: tuple[ClassRule, ...] = ()
    requirements: tuple[Requirement, ...] = field(default=())
    kind = "classes"

    # ---- names and layout
    @property
    def labels(self) -> tuple:
        return tuple(self.dataset.labels)

    @property
    def carried(self) -> tuple:
        """The labels whose classes carry coefficients (all but the reference class)."""
        return tuple(v for v in self.labels if self.reference is None or v != self.reference)

    @property
    def features(self) -> tuple[str, ...]:
        return self.dataset.names

    @property
    def coefficient_names(self) -> tuple[str, ...]:
        return self.dataset.names + (("intercept",) if self.intercept else ())

    @property
    def flat(self) -> tuple[str, ...]:
        """Names of the coefficients in theta's w part (class after class)."""
        return flat_names(self.features, self.carried)

    @property
    def size(self) -> int:
        d, c = len(self.features), len(self.carried)
        return d * c + c * int(self.intercept)

    def flat_penalties(self) -> tuple:
        return tuple(per_class(p, self.features, self.carried) for p in self.penalties)

    def split(self, theta) -> tuple[np.ndarray, np.ndarray]:
        """(W, b): d x C coefficients and C intercepts (zeros without an intercept)."""
        d, c = len(self.features), len(self.carried)
        theta = np.asarray(theta, float)
        W = theta[: d * c].reshape(c, d).T
        b = theta[d * c:] if self.intercept else np.zeros(c)
        return W, b

    def column(self, label) -> int:
        """Index of a label among the classes that carry coefficients."""
        return self.carried.index(label)

    def scores(self, X, theta) -> np.ndarray:
        """n x K scores (the reference class's column is 0)."""
        W, b = self.split(theta)
        carried = np.asarray(X @ W) + b
        if self.reference is None:
            return carried
        out = np.zeros((carried.shape[0], len(self.labels)))
        out[:, [self.labels.index(v) for v in self.carried]] = carried
        return out

    def free_features(self) -> np.ndarray:
        """Features no penalty acts on in any class (bool, d): the sum-to-zero rule pins those."""
        d, c = len(self.features), len(self.carried)
        free = np.ones(d * c, bool)
        for pen in self.flat_penalties():
            free &= pen.null_space(self.flat).any(axis=1)
        return free.reshape(c, d).all(axis=0)

    def identification(self) -> list[np.ndarray]:
        """Rows E of E theta = 0 that identify the coefficients (sum to zero; none beside a reference)."""
        if self.reference is not None:
            return []
        d, c = len(self.features), len(self.carried)
        rows = []
        for j in np.flatnonzero(self.free_features()):
            e = np.zeros(self.size)
            e[j: d * c: d] = 1.0
            rows.append(e)
        if self.intercept:
            e = np.zeros(self.size)
            e[d * c:] = 1.0
            rows.append(e)
        return rows

    # ---- rules
    def context(self) -> Context:
        """What a rule on one class compiles against: that class's names and the design rows."""
        ds = self.dataset
        enc = ds.encoding
        reference, former = (enc.reference_names, enc.former_names) if enc is not None else ((), {})
        return Context(self.coefficient_names, design_with_ones(ds.X, self.intercept), ds.frame, reference, former,
                       encoding=enc)

    def embed(self, req: Requirement, label, text: str) -> Requirement:
        """A requirement over one class's (w, b) placed in the flat theta at that class."""
        d, c, k = len(self.features), len(self.carried), self.column(label)

        def place(A):
            A = np.atleast_2d(np.asarray(A, float))
            out = np.zeros((A.shape[0], self.size))
            out[:, k * d:(k + 1) * d] = A[:, :d]
            if self.intercept:
                out[:, d * c + k] = A[:, d]
            return out

        f = None if req.f is None else place(req.f)[0]
        return replace(req, A=place(req.A), f=f, text=f"{req.text} for class {label!r}",
                       rule=text)

    def problem_class(self) -> str:
        cones = [self.loss.cone] + [p.cone for p in self.penalties]
        cones += ["second_order" if r.sense == "norm" and r.order == 2 else "linear" for r in self.requirements]
        return problem_class(cones)


# ----------------------------------------------------------------------------- the cvxpy program

@dataclass
class ClassesModel:
    problem: cp.Problem
    scaled: cp.Variable                 # theta in scaled units (see to_theta)
    to_theta: sp.csr_matrix             # theta = to_theta @ scaled
    constraints: list                   # (requirement, constraint) per requirement
    margins: cp.Constraint | None       # multiclass hinge: xi_i >= z_ik + [k != y] - z_iy (duals = q)
    build_seconds: float


def _scaling(X, intercept: bool):
    """Column centres and spreads the program is solved in (centred only with an intercept)."""
    if sp.issparse(X):
        spread = np.sqrt(np.asarray(X.multiply(X).mean(axis=0)).ravel())
        centre = np.zeros(X.shape[1])
    else:
        centre = X.mean(axis=0) if intercept else np.zeros(X.shape[1])
        spread = np.sqrt(((X - centre) ** 2).mean(axis=0))
    spread = np.where(spread > 0, spread, 1.0)
    return centre, spread


def _unscale(problem: ClassesProblem, centre, spread) -> sp.csr_matrix:
    """theta = T @ scaled: w_k = scaled_w_k / spread, b_k = scaled_b_k - centre'(scaled_w_k / spread)."""
    d, c = len(problem.features), len(problem.carried)
    blocks = sp.kron(sp.eye(c), sp.diags(1.0 / spread))
    if not problem.intercept:
        return sp.csr_matrix(blocks)
    shift = sp.kron(sp.eye(c), sp.csr_matrix(-(centre / spread)[None, :]))
    return sp.csr_matrix(sp.bmat([[blocks, None], [shift, sp.eye(c)]]))


def formulate(problem: ClassesProblem) -> ClassesModel:
    """The whole task as one cvxpy program over scaled coefficients (better conditioned)."""
    t0 = time.perf_counter()
    ds = problem.dataset
    X = ds.X
    n, d, c, K = X.shape[0], len(problem.features), len(problem.carried), len(problem.labels)
    centre, spread = _scaling(X, problem.intercept)
    Xs = (X.multiply(1.0 / spread)).tocsr() if sp.issparse(X) else (X - centre) / spread
    T = _unscale(problem, centre, spread)
    a = ds.weights / ds.weights.sum()
    y = ds.y.astype(int)
    Y = one_hot(y, K)
    scaled = cp.Variable(problem.size, name="theta")
    with warnings.catch_warnings():
        warnings.simplefilter("ignore", RuntimeWarning)
        Ws = cp.reshape(scaled[: d * c], (d, c), order="F")
        carried = Xs @ Ws
        if problem.intercept:
            carried = carried + np.ones((n, 1)) @ cp.reshape(scaled[d * c:], (1, c), order="F")
        if problem.reference is None:
            Z = carried
        else:
            place = np.zeros((c, K))
            place[np.arange(c), [problem.labels.index(v) for v in problem.carried]] = 1.0
            Z = carried @ place
        theta = T @ scaled
        margins = None
        if isinstance(problem.loss, MulticlassHinge):
            xi = cp.Variable(n, name="xi")
            zy = cp.sum(cp.multiply(Y, Z), axis=1)
            ones = np.ones((1, K))
            margins = Z + (1.0 - Y) - cp.reshape(zy, (n, 1), order="F") @ ones <= cp.reshape(xi, (n, 1), order="F") @ ones
            loss_term = a @ xi
        else:
            loss_term = a @ problem.loss.expr(Z, Y)
        objective = loss_term
        for pen in problem.flat_penalties():
            objective = objective + pen.expr(theta[: d * c], problem.flat)
        pairs = [(req, requirement_constraint(req, theta)) for req in problem.requirements]
        constraints = [con for _, con in pairs] + ([margins] if margins is not None else [])
        E = problem.identification()
        if E:
            constraints.append((np.vstack(E) @ T) @ scaled == 0)
        prob = cp.Problem(cp.Minimize(objective), constraints)
    return ClassesModel(prob, scaled, T, pairs, margins, time.perf_counter() - t0)
