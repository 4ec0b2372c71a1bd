"""Problem classes: the cone each building block needs, ordered from the narrowest to the widest.
A task's class is the widest its pieces declare; solvers declare which classes they handle."""
from __future__ import annotations

CLASSES = ("linear", "quadratic", "second_order", "exponential")
CLASS_LABEL = {"linear": "LP", "quadratic": "QP", "second_order": "SOCP", "exponential": "exponential cone"}


def problem_class(cones) -> str:
    """The widest class among the cones the pieces declare."""
    return max(cones, key=CLASSES.index, default="linear")
