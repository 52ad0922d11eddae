"""Disjoint sets: joins are transitive, and a second join of one set says so."""

from __future__ import annotations

from assistant.disjoint import DisjointSets


def test_joins_are_transitive_and_report_repeats() -> None:
    sets: DisjointSets[str] = DisjointSets()
    assert not sets.joined("a", "c")
    assert sets.union("a", "b") and sets.union("b", "c")
    assert sets.joined("a", "c") and sets.find("a") == sets.find("c")
    assert not sets.union("c", "a")  # already one set: a loop, in the solver's terms
    assert not sets.joined("a", "d")
