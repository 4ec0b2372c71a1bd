"""Errors raised by learnopt.

Every mistake a user can make ends in a subclass of :class:`LearnoptError`. Each error
names the user's own object (column, rule, parameter) and says how to fix it, and knows
the exit code the command line uses for it.
"""
from __future__ import annotations

import os
import sys
import warnings


class LearnoptError(Exception):
    """Base class of every error learnopt raises on purpose."""

    exit_code: int = 1

    def __init__(self, message: str, *, problems: list[str] | None = None) -> None:
        self.problems = list(problems) if problems else [message]
        if problems and len(problems) > 1:
            message = message + "\n" + "\n".join(f"  - {p}" for p in problems)
        super().__init__(message)


class DataError(LearnoptError, ValueError):
    """The data, a column name or a name in a rule is unusable as given."""

    exit_code = 2


class OutputError(DataError):
    """An output would be written where it must not: outside the recipe's folder, onto the data or
    the recipe, onto another output, or onto something that is not a regular file (a folder, a
    device, a pipe). The message names the output and the fix."""


class ParameterError(LearnoptError, ValueError):
    """A parameter of a loss, penalty, rule or solve call is out of its allowed range.

    ``parameters`` names the parameters that failed (when the raiser knows them) and
    ``demands`` says, for each of them, what it has to be ("above 0"), so a recipe reader can
    point at the right key in its own words.
    """

    exit_code = 2

    def __init__(self, message: str, *, problems: list[str] | None = None, parameters=(),
                 demands=()) -> None:
        super().__init__(message, problems=problems)
        self.parameters = tuple(parameters)
        self.demands = tuple(demands)


class NotConvexError(LearnoptError, ValueError):
    """A piece of the task is not convex; the message names the piece and a convex alternative."""

    exit_code = 3


class SolverError(LearnoptError, RuntimeError):
    """No usable solver, an unknown solver name, or every capable solver failed."""

    exit_code = 4


class TooLargeError(LearnoptError, MemoryError):
    """A formulation would not fit in memory; the message says which route or scale-out fits."""

    exit_code = 5


class MissingDependencyError(LearnoptError, ImportError):
    """An optional part of learnopt needs a package that is not installed; the message says which extra."""

    exit_code = 6


class AccuracyWarning(UserWarning):
    """The answer's accuracy is limited by the data (an ill-conditioned design), not the solver."""


class OldSpellingWarning(DeprecationWarning):
    """Something was written in a form learnopt has replaced (a rule quoted in backticks, an
    encoded level named ``column=level``); it is still read in this release, and the message
    gives the new form."""


def warn_old_spelling(message: str) -> None:
    """Issue an :class:`OldSpellingWarning` that points at the first line outside learnopt (the
    user's own call), so that a script run directly shows it."""
    package = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
    frame, level = sys._getframe(0), 1
    while frame is not None and os.path.abspath(frame.f_code.co_filename).startswith(package + os.sep):
        frame, level = frame.f_back, level + 1
    warnings.warn(message, OldSpellingWarning, stacklevel=level)
