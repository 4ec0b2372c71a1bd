"""The verdict words every result uses, and the caution printed beside results that could drive
a decision.

``Status`` members are strings, so ``fit.status == "optimal"`` keeps working and a status
prints, formats and serialises as its plain word.

>>> Status.OPTIMAL == "optimal", f"{Status.UNVERIFIED}"
(True, 'unverified')
"""
from __future__ import annotations

from enum import Enum


class Status(str, Enum):
    """What a fit is, judged by learnopt's own evidence (never by a solver's word alone).

    - ``optimal``: the certificate confirms it (relative gap and violation within tolerance);
    - ``unverified``: a point was found but the certificate does not confirm it;
    - ``infeasible``: the requirements cannot hold together (confirmed by a relaxation);
    - ``unbounded``: the objective falls without limit (seen by two solvers, or the last one);
    - ``failed``: no usable point.
    """

    OPTIMAL = "optimal"
    UNVERIFIED = "unverified"
    INFEASIBLE = "infeasible"
    UNBOUNDED = "unbounded"
    FAILED = "failed"

    __str__ = str.__str__
    __format__ = str.__format__

    def __repr__(self) -> str:
        return repr(self.value)

    @property
    def has_point(self) -> bool:
        """Does a result with this status carry a point (coefficients or centres)?"""
        return self in (Status.OPTIMAL, Status.UNVERIFIED)


CAUTION = ("This fit is a statistical estimate; decisions based on it follow local rules "
           "and professional judgement.")

PLACEMENT_CAUTION = ("These centres are an estimate from the points and weights given, and a local optimum; "
                     "siting decisions follow local rules, surveys of the sites and professional judgement.")
