"""A progress bar for loops of many fits (paths, cross-validation, bootstrap refits)."""
from __future__ import annotations

import sys


class ProgressBar:
    """A rich progress bar on a terminal; silent otherwise, when asked (``enabled=False``) or
    when rich is not installed. ``enabled=None``: on only when stderr is a terminal."""

    def __init__(self, total: int, label: str, enabled: bool | None):
        self.bar = None
        if enabled is False or (enabled is None and not sys.stderr.isatty()):
            return
        try:
            from rich.progress import Progress
        except ImportError:
            return
        self.bar = Progress(transient=True)
        self.bar.start()
        self.job = self.bar.add_task(label, total=total)

    def step(self, k: int = 1):
        if self.bar is not None:
            self.bar.advance(self.job, k)

    def close(self):
        if self.bar is not None:
            self.bar.stop()
