"""learnopt: pose a convex learning task in a few lines, solve it with an open solver, and get
the answer back with evidence (certified gap, timings, prices of the rules).

>>> import learnopt as lo
>>> lo.loss.huber(2.0)
Huber(delta=2.0)
"""
from learnopt import rules as rule
from learnopt.centres.fusion import FusionFit, FusionTask, fusion
from learnopt.centres.placement import CentresFit, CentresTask, centres
from learnopt.core.errors import (AccuracyWarning, DataError, LearnoptError, MissingDependencyError, NotConvexError,
                                  OldSpellingWarning, ParameterError, SolverError, TooLargeError)
from learnopt.core.status import Status
from learnopt.interface.task import Task, classification, load_fit, regression
from learnopt.problem.problem import Problem
from learnopt.solve.evaluation import Evaluation
from learnopt.solve.fit import Fit
from learnopt.solve.solvers import installed as installed_solvers
from learnopt.solve.timings import Attempt, Timings
from learnopt.terms import losses as loss
from learnopt.terms import penalties as penalty
from learnopt.terms.convexity import Verdict

from learnopt.core.version import __version__  # noqa: F401 - the face shows it


def load_recipe(path) -> Task:
    """The task a recipe file describes (needs the ``cli`` extra, for pydantic).

    See :func:`learnopt.interface.recipes.load_recipe`. Imported on first use, because recipes
    need pydantic (an optional extra).
    """
    from learnopt.interface.recipes import load_recipe as _load_recipe
    return _load_recipe(path)


def estimator(kind: str = "regression", loss=None, **options):
    """A scikit-learn compatible estimator around a learnopt task (needs scikit-learn).

    See :func:`learnopt.interface.adapter.estimator` for the parameters. The adapter is imported
    here, on first use, because it imports scikit-learn (an optional extra).
    """
    from learnopt.interface.adapter import estimator as _estimator
    return _estimator(kind, loss, **options)


__all__ = [
    "regression", "classification", "centres", "CentresTask", "CentresFit", "fusion", "FusionTask", "FusionFit", "estimator", "load_fit", "load_recipe", "loss", "penalty", "rule", "Task", "Problem", "Status", "Fit", "Attempt", "Timings",
    "Verdict", "Evaluation", "LearnoptError", "DataError", "ParameterError", "NotConvexError",
    "SolverError", "TooLargeError", "MissingDependencyError", "AccuracyWarning", "OldSpellingWarning",
    "installed_solvers",
]
