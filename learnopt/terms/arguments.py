"""Old keyword names kept working for one release.

The building blocks check their values with :func:`learnopt.core.checks.check` (ranges and
choices declared as data) and :func:`learnopt.core.checks.refusal` (checks written by hand);
both record, on the error, which parameters failed and what each has to be, so a caller that
knows where the values came from (the recipe reader) can point at them. :func:`renamed` is a
decorator that keeps old keyword names working with a DeprecationWarning.
"""
from __future__ import annotations

import functools
import inspect
import warnings

from learnopt.core.errors import ParameterError


def renamed(**old_to_new: str):
    """Decorator: accept each old keyword for one release, with a DeprecationWarning.

    Giving an old keyword and its new name together is a ParameterError, and so is a call that
    does not fit the signature (a missing or unknown keyword). The wrapped function keeps its
    own signature (``inspect.signature`` and ``help`` show the new names only) and lists the
    renamings in its ``renamed`` attribute. Works on functions and on a class's ``__init__``.
    """
    def wrap(fn):
        signature = inspect.signature(fn)
        order = list(signature.parameters)
        owner = fn.__qualname__.rsplit(".", 1)[0] if fn.__name__ == "__init__" else fn.__name__
        takes = ", ".join(n for n in order if n != "self")

        @functools.wraps(fn)
        def call(*args, **kwargs):
            for old, new in old_to_new.items():
                if old not in kwargs:
                    continue
                value = kwargs.pop(old)
                if new in kwargs or (new in order and order.index(new) < len(args)):
                    raise ParameterError(f"{owner} was given both '{new}' and its old name '{old}'; "
                                         f"give '{new}' only.", parameters=(new,))
                warnings.warn(f"{owner}: the keyword '{old}' is now called '{new}'. '{old}' is still "
                              f"accepted in this release and will be removed in the next one.",
                              DeprecationWarning, stacklevel=2)
                kwargs[new] = value
            try:
                signature.bind(*args, **kwargs)
            except TypeError as exc:
                raise ParameterError(f"{owner}: {exc}; it takes {takes}.") from None
            return fn(*args, **kwargs)

        call.renamed = dict(old_to_new)
        return call

    return wrap


def old_field_names(**old_to_new: str):
    """Class decorator: :func:`renamed` applied to a dataclass's ``__init__`` (old model files
    and old code that build the class with the old field names keep working for one release)."""
    def wrap(cls):
        cls.__init__ = renamed(**old_to_new)(cls.__init__)
        return cls

    return wrap
