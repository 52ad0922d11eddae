"""Disjoint sets (union-find): which things are joined, through any chain of joins.

Used wherever the project asks "are these connected?": nodes joined by conducting parts
(lint's loop check, the solver's zero-ohm loops) and hypotheses joined by being
indistinguishable (the planner's ambiguity groups).
"""

from __future__ import annotations

from collections.abc import Hashable
from typing import Generic, TypeVar

T = TypeVar("T", bound=Hashable)


class DisjointSets(Generic[T]):
    """Union-find with path halving; an element is its own set until joined."""

    def __init__(self) -> None:
        self._parent: dict[T, T] = {}

    def find(self, x: T) -> T:
        """The representative of ``x``'s set."""
        parent = self._parent
        while parent.setdefault(x, x) != x:
            parent[x] = parent[parent[x]]
            x = parent[x]
        return x

    def union(self, a: T, b: T) -> bool:
        """Join the sets of ``a`` and ``b``; False if they were one set already."""
        ra, rb = self.find(a), self.find(b)
        if ra == rb:
            return False
        self._parent[ra] = rb
        return True

    def joined(self, a: T, b: T) -> bool:
        """Whether ``a`` and ``b`` are in one set."""
        return self.find(a) == self.find(b)
