"""Preparations: access work that several tests share, made once in a diagnosis.

A trim panel off, a relay on a breakout lead, the fuel and ignition fuses out for cranking:
the first test that needs one pays its minutes, and every later test that needs it costs only
its own. What a test costs therefore depends on the tests already made; these functions are the
one place that reckons it, for the planner, the trade's walks, the optimum and the reports.
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence

from assistant.predict import PredictionTable, TestInfo


def made_by(table: PredictionTable, tests: Iterable[int]) -> frozenset[str]:
    """The preparations made once ``tests`` (indices) have been made."""
    return frozenset(ref for t in tests for ref, _ in table.tests[t].prepare)


def pending(info: TestInfo, made: frozenset[str]) -> tuple[tuple[str, float], ...]:
    """The preparations a test still needs, with their minutes."""
    return tuple((ref, minutes) for ref, minutes in info.prepare if ref not in made)


def test_minutes(info: TestInfo, made: frozenset[str] = frozenset()) -> float:
    """Minutes of a test once ``made`` are made: its own, plus every preparation still needed."""
    return info.cost_minutes + sum(minutes for _, minutes in pending(info, made))


def sequence_minutes(table: PredictionTable, tests: Sequence[int]) -> float:
    """Minutes of a sequence of tests made in order, each preparation paid once."""
    made: set[str] = set()
    total = 0.0
    for t in tests:
        info = table.tests[t]
        total += test_minutes(info, frozenset(made))
        made.update(ref for ref, _ in info.prepare)
    return total
