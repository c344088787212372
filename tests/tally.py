"""Counts of what the fault suites tried, printed at the end of the test run."""

from __future__ import annotations

from collections import Counter

COUNTS: Counter = Counter()


def add(what: str, n: int = 1) -> None:
    COUNTS[what] += n
