"""Shared test plumbing: the reliability tally printed at the end of the run.

Tests that try bad input, hostile recipes or rules, or injected solver faults record how each
case ended with the ``reliability`` fixture; the summary counts them and, above all, counts
wrong answers marked optimal (expected: zero).
"""
from collections import Counter

import pytest

_TALLY: Counter = Counter()


class Tally:
    def record(self, kind: str, outcome: str) -> None:
        """kind: bad input / bad file (damaged, misplaced or deeply nested files) / hostile recipe /
        hostile rule / command line (exit code of a bad run) / solver fault; outcome: how it ended."""
        _TALLY[(kind, outcome)] += 1


@pytest.fixture
def reliability() -> Tally:
    return Tally()


def pytest_terminal_summary(terminalreporter):
    if not _TALLY:
        return
    terminalreporter.section("reliability")
    kinds = sorted({k for k, _ in _TALLY})
    for kind in kinds:
        parts = ", ".join(f"{outcome}: {n}" for (k, outcome), n in sorted(_TALLY.items()) if k == kind)
        total = sum(n for (k, _), n in _TALLY.items() if k == kind)
        terminalreporter.write_line(f"{kind:16s} {total:4d} tried ({parts})")
    wrong = sum(n for (_, outcome), n in _TALLY.items() if outcome == "WRONG ANSWER MARKED OPTIMAL")
    terminalreporter.write_line(f"wrong answers marked optimal: {wrong}")
