"""learnopt: pose a convex learning task in a few lines, solve it with an open solver, and get
the answer back with evidence (certified gap, timings, prices of the rules).

>>> import learnopt as lo
>>> lo.loss.huber(2.0)
Huber(delta=2.0)
"""
from . import losses as loss
from . import penalties as penalty
from . import rules as rule
from .convexity import Verdict
from .errors import DataError, LearnoptError, NotConvexError, ParameterError, SolverError, TooLargeError
from .evaluate import Evaluation
from .fit import Attempt, Fit, Timings
from .solvers import installed as installed_solvers
from .task import Task, classification, regression

__version__ = "0.1.0"

__all__ = [
    "regression", "classification", "loss", "penalty", "rule", "Task", "Fit", "Attempt", "Timings",
    "Verdict", "Evaluation", "LearnoptError", "DataError", "ParameterError", "NotConvexError",
    "SolverError", "TooLargeError", "installed_solvers",
]
