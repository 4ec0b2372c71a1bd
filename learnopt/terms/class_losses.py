"""Losses of a task with several classes: one score per class and row, one small frozen object each.

Row i has scores z_i = (z_i1, ..., z_iK) (``z_ik = x_i'w_k + b_k``) and a class y_i; the task's
objective is the weighted mean ``sum_i a_i f(z_i; y_i)`` with ``a_i = w_i / sum(w)`` (the same
convention as every learnopt loss), plus the penalties.

=====================  ===============================================  ======================================
loss                   f(z; y)                                          conjugate f*(u; y), q = u + e_y
=====================  ===============================================  ======================================
multinomial            log sum_k exp(z_k) - z_y  (softmax cross-entropy)  sum_k q_k log q_k, q in the simplex
multiclass_hinge       max_k (z_k + [k != y]) - z_y  (Crammer-Singer)   q_y - 1, q in the simplex
=====================  ===============================================  ======================================

Both are convex in z (a log-sum-exp and a max of affine functions, each minus a linear term) and
unchanged when the same number is added to every score of a row, so only score differences are
identified (see :mod:`learnopt.solve.classes`). Their dual domains are the same: u with
u + e_y in the probability simplex. The multinomial conjugate is the negative entropy of q;
for the multiclass hinge, ``max_k (z_k + D_k) = sup over q in the simplex of q.(z + D)`` gives
``f*(u) = -q.D = q_y - 1`` (K. Crammer and Y. Singer, On the algorithmic implementation of
multiclass kernel-based vector machines, JMLR 2, 2001, section 3; derived, from memory).

The binary losses name their multiclass versions: ``logistic`` fits the multinomial loss and
``hinge`` the multiclass hinge when the target has more than two labels.
"""
from __future__ import annotations

from dataclasses import dataclass
from typing import ClassVar

import cvxpy as cp
import numpy as np
from scipy.special import logsumexp, softmax

SIMPLEX_TOL = 1e-9      # q may leave the simplex by this much (round-off) and still count as inside


def one_hot(y: np.ndarray, k: int) -> np.ndarray:
    """n x k matrix with a 1 in column y_i of row i."""
    out = np.zeros((len(y), k))
    out[np.arange(len(y)), np.asarray(y, int)] = 1.0
    return out


@dataclass(frozen=True)
class ClassLoss:
    """Base class: a convex loss of a row's K scores and its class."""

    name: ClassVar[str] = "class loss"
    binary: ClassVar[str] = ""           # the binary loss whose multiclass version this is
    cone: ClassVar[str] = "linear"
    smooth: ClassVar[bool] = False
    probabilities: ClassVar[bool] = False  # do the scores read as class probabilities (softmax)?

    def describe(self) -> str:
        return self.name

    def value(self, Z: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Per-row value f(z_i; y_i)."""
        raise NotImplementedError

    def gradient(self, Z: np.ndarray, y: np.ndarray) -> np.ndarray:
        """A (sub)gradient per row (n x K); every row sums to zero."""
        raise NotImplementedError

    def simplex_conjugate(self, Q: np.ndarray, y: np.ndarray) -> np.ndarray:
        """f*(q - e_y) per row for q already checked to lie in the simplex."""
        raise NotImplementedError

    def conjugate(self, U: np.ndarray, y: np.ndarray) -> np.ndarray:
        """Per-row conjugate f*(u_i; y_i); +inf where u_i + e_y is outside the simplex."""
        Q = np.asarray(U, float) + one_hot(y, U.shape[1])
        inside = (Q >= -SIMPLEX_TOL).all(axis=1) & (np.abs(Q.sum(axis=1) - 1.0) <= SIMPLEX_TOL * U.shape[1])
        out = np.full(len(Q), np.inf)
        out[inside] = self.simplex_conjugate(np.clip(Q[inside], 0.0, None), np.asarray(y)[inside])
        return out

    def expr(self, Z: cp.Expression, Y: np.ndarray) -> cp.Expression:
        """Per-row cvxpy expression (Y: the one-hot classes)."""
        raise NotImplementedError


@dataclass(frozen=True)
class Multinomial(ClassLoss):
    """Softmax cross-entropy log(sum_k exp z_k) - z_y; gradient softmax(z) - e_y.

    Conjugate: the negative entropy sum_k q_k log q_k of q = u + e_y on the simplex."""

    name: ClassVar[str] = "multinomial"
    binary: ClassVar[str] = "logistic"
    cone: ClassVar[str] = "exponential"
    smooth: ClassVar[bool] = True
    probabilities: ClassVar[bool] = True

    def value(self, Z, y):
        Z = np.asarray(Z, float)
        return logsumexp(Z, axis=1) - Z[np.arange(len(Z)), np.asarray(y, int)]

    def gradient(self, Z, y):
        return softmax(np.asarray(Z, float), axis=1) - one_hot(y, Z.shape[1])

    def simplex_conjugate(self, Q, y):
        with np.errstate(divide="ignore", invalid="ignore"):
            return np.sum(np.where(Q > 0, Q * np.log(np.where(Q > 0, Q, 1.0)), 0.0), axis=1)

    def expr(self, Z, Y):
        return cp.log_sum_exp(Z, axis=1) - cp.sum(cp.multiply(Y, Z), axis=1)


@dataclass(frozen=True)
class MulticlassHinge(ClassLoss):
    """Crammer-Singer hinge max_k (z_k + [k != y]) - z_y: zero once the true class's score leads
    every other by at least 1. Conjugate: q_y - 1 for q = u + e_y on the simplex."""

    name: ClassVar[str] = "multiclass_hinge"
    binary: ClassVar[str] = "hinge"

    def _shifted(self, Z, y):
        Z = np.asarray(Z, float)
        return Z + 1.0 - one_hot(y, Z.shape[1])

    def value(self, Z, y):
        Z = np.asarray(Z, float)
        return self._shifted(Z, y).max(axis=1) - Z[np.arange(len(Z)), np.asarray(y, int)]

    def gradient(self, Z, y):
        k = Z.shape[1]
        return one_hot(self._shifted(Z, y).argmax(axis=1), k) - one_hot(y, k)

    def simplex_conjugate(self, Q, y):
        return Q[np.arange(len(Q)), np.asarray(y, int)] - 1.0

    def expr(self, Z, Y):
        return cp.max(Z + 1.0 - Y, axis=1) - cp.sum(cp.multiply(Y, Z), axis=1)


def multinomial() -> Multinomial:
    """Softmax cross-entropy over several classes (the multiclass version of ``logistic``)."""
    return Multinomial()


def multiclass_hinge() -> MulticlassHinge:
    """The multiclass hinge of Crammer and Singer (the multiclass version of ``hinge``)."""
    return MulticlassHinge()


CLASS_LOSSES: dict[str, type[ClassLoss]] = {cls.binary: cls for cls in (Multinomial, MulticlassHinge)}


def for_several(loss) -> ClassLoss | None:
    """The multiclass loss for a loss object or name (a class loss itself, or the binary loss it
    extends); None when the loss has no multiclass version."""
    if isinstance(loss, ClassLoss):
        return loss
    name = loss if isinstance(loss, str) else getattr(loss, "name", None)
    for cls in CLASS_LOSSES.values():
        if name in (cls.binary, cls.name):
            return cls()
    return None
