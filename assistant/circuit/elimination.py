"""Sparse Gaussian elimination of many matrices of one pattern at once, in a fixed pivot order.

All variants of a netlist share one sparsity pattern (an absent element is a zero value, a
floating node a pinned row), so the elimination can be planned once, symbolically, and carried
out for every variant together: each pivot is a handful of array operations over the whole
batch, whatever its size. The plan is a minimum-degree order on the pattern (node rows first,
branch-current rows last, so a zero-ohm branch's zero diagonal is pivoted only after the nodes
it joins have filled it), with the fill-in it causes.

There is no pivoting: a node's conductance diagonal dominates its row, which is what makes this
safe for nodal matrices. Any variant with a pivot that is negligible beside its row, or a
non-finite result, is reported back, and the caller solves it with a pivoting LU instead.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

PIVOT_FLOOR = 1e-300
PIVOT_RELATIVE = 1e-12  # a pivot below this fraction of its row's magnitude is not trusted


@dataclass(frozen=True, eq=False)
class _Step:
    pivot: int  # row (= column) eliminated
    diagonal: int  # its value position
    rest: np.ndarray  # the rows / columns still to eliminate that touch it
    column: np.ndarray  # value positions of (rest, pivot): become the multipliers
    row: np.ndarray  # value positions of (pivot, rest)
    update: np.ndarray  # (len(rest), len(rest)) value positions of (rest, rest)


class Elimination:
    """The plan for one pattern of ``size`` × ``size`` entries at ``rows``, ``cols``."""

    def __init__(self, size: int, rows: np.ndarray, cols: np.ndarray, last: int) -> None:
        """``last``: rows from this index on are eliminated after all the others."""
        self.size = size
        self.entries = len(rows)
        position: dict[tuple[int, int], int] = {(int(r), int(c)): k for k, (r, c) in enumerate(zip(rows, cols))}
        neighbours: list[set[int]] = [set() for _ in range(size)]
        for r, c in position:
            if r != c:
                neighbours[r].add(c)
                neighbours[c].add(r)
        for i in range(size):
            position.setdefault((i, i), len(position))

        def at(i: int, j: int) -> int:
            return position.setdefault((i, j), len(position))

        remaining = set(range(size))
        steps: list[_Step] = []
        while remaining:
            early = [i for i in remaining if i < last] or list(remaining)
            p = min(early, key=lambda i: (len(neighbours[i]), i))
            rest = sorted(neighbours[p])
            steps.append(_Step(
                p, at(p, p), np.array(rest, dtype=int),
                np.array([at(i, p) for i in rest], dtype=int),
                np.array([at(p, j) for j in rest], dtype=int),
                np.array([[at(i, j) for j in rest] for i in rest], dtype=int).reshape(len(rest), len(rest)),
            ))
            for i in rest:  # eliminating p joins all its neighbours to each other (fill-in)
                neighbours[i].discard(p)
                neighbours[i].update(j for j in rest if j != i)
            remaining.discard(p)
        self.steps = tuple(steps)
        self.filled = len(position)
        self.cols = np.asarray(cols, dtype=int)
        self.by_row = np.argsort(rows, kind="stable")
        sorted_rows = np.asarray(rows)[self.by_row]
        self.row_starts = np.searchsorted(sorted_rows, np.arange(size))  # every row has its diagonal

    def solve(self, data: np.ndarray, z: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
        """Solutions ``x`` (B, size, K) of every variant, and a mask of the variants to redo.

        ``data`` (B, entries) are the matrix values at the pattern's positions.
        """
        B = data.shape[0]
        # entry-major layout: each gathered entry is one contiguous row of B values
        values = np.zeros((self.filled, B))
        values[: self.entries] = data.T
        bad = np.zeros(B, dtype=bool)
        # a pivot is trusted when it is not negligible beside the row it came from
        row_scale = np.add.reduceat(np.abs(values[: self.entries][self.by_row]), self.row_starts, axis=0)
        with np.errstate(all="ignore"):
            for st in self.steps:
                pivot = values[st.diagonal]
                bad |= ~(np.abs(pivot) > np.maximum(PIVOT_RELATIVE * row_scale[st.pivot], PIVOT_FLOOR))
                if st.rest.size:
                    multipliers = values[st.column] / np.where(bad, 1.0, pivot)
                    values[st.column] = multipliers
                    values[st.update] -= multipliers[:, None, :] * values[st.row][None, :, :]
            x = np.transpose(z, (1, 0, 2)).astype(float, order="C", copy=True)  # (size, B, K), never z itself
            for st in self.steps:  # forward: L has a unit diagonal
                if st.rest.size:
                    x[st.rest] -= values[st.column][:, :, None] * x[st.pivot][None, :, :]
            for st in reversed(self.steps):  # back substitution
                if st.rest.size:
                    x[st.pivot] -= np.einsum("rb,rbk->bk", values[st.row], x[st.rest])
                x[st.pivot] /= np.where(bad, 1.0, values[st.diagonal])[:, None]
            bad |= ~np.isfinite(x).all(axis=(0, 2))
        return np.transpose(x, (1, 0, 2)), bad
