"""The ``learnopt`` command's entry point.

The commands live in :mod:`learnopt.interface.commands`. They need the ``cli`` extra (click and
rich for the screen, pydantic for recipes); without it, ``learnopt`` prints how to install it
and exits with code 6 instead of showing an import traceback.
"""
from __future__ import annotations

import importlib.util
import sys

EXTRA = ("click", "rich", "pydantic")
MISSING = [name for name in EXTRA if importlib.util.find_spec(name) is None]

if not MISSING:
    from learnopt.interface.commands import main
else:
    def main(args=None) -> None:
        """Without the cli extra: say what is missing and how to get it."""
        print(f"learnopt's command line needs {', '.join(MISSING)}: pip install 'learnopt[cli]'",
              file=sys.stderr)
        raise SystemExit(6)


if __name__ == "__main__":  # pragma: no cover
    main()
