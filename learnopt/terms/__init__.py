"""The building blocks of a task's objective: losses and penalties, and the convexity verdict.

Users reach them as ``lo.loss`` (:mod:`learnopt.terms.losses`) and ``lo.penalty``
(:mod:`learnopt.terms.penalties`); each of those modules holds its registry (``LOSSES``,
``PENALTIES``), one row per named block, from which the task kinds, the recipe schema and the
common tests are derived.
"""
