"""What the planner is measured against: the trade's linear walk, half-split, and the optimum.

- Linear walk: voltage at each test point from the one furthest from the supply toward the
  supply, stopping at the first good point (common practice), with the meter (a scan tool's
  live data is not a test point).
- Half-split: voltage at the middle test point of the path still in doubt, halving it each time
  (common practice).
- The optimum of the noise-free problem (each hypothesis shows one outcome per test): the least
  expected minutes to reach the stopping rule, by memoised dynamic programming over the sets of
  hypotheses that test outcomes can reach (the AND/OR search of Pattipati & Alexandridis,
  IEEE Trans. SMC 20(4), 1990, solved exactly). With every subset test at unit cost it is the
  expected length of a Huffman code (Huffman, 1952); with independent perfect component tests,
  the cost of the probability-over-cost order (Kadane & Simon, 1977). tests/test_baselines.py
  checks both.
"""

from __future__ import annotations

import time
from collections import deque
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from assistant.beliefs import EvidenceModel
from assistant.predict import PredictionTable
from assistant.preparation import sequence_minutes
from assistant.reading import Reading
from assistant.ruleset.model import Ruleset, VoltageTest

GOOD_SIGMAS = 4.0  # a reading within this many meter uncertainties of the healthy range is good


class _OutOfTime(Exception):
    pass


def optimal_cost(outcomes: np.ndarray, priors: np.ndarray, costs: Sequence[float], threshold: float,
                 *, time_limit: float = 60.0,
                 prepare: Sequence[Sequence[tuple[str, float]]] | None = None) -> float | None:
    """Least expected cost (prior-weighted) to reach the stop on a noise-free problem.

    ``outcomes[h, t]`` is the outcome (an integer) test ``t`` shows under hypothesis ``h``. A set
    of hypotheses left is done when its most probable member holds ``threshold`` of its
    probability, or when no test splits it. ``prepare[t]``: the preparations test ``t`` needs with
    their minutes, paid by the first test that needs each (the search then runs over the sets of
    hypotheses and of preparations made). None if the search does not finish in ``time_limit``
    seconds.
    """
    out = np.asarray(outcomes)
    p = np.asarray(priors, dtype=float)
    c = np.asarray(costs, dtype=float)
    needs = [tuple(prepare[t]) if prepare is not None else () for t in range(out.shape[1])]
    live = [h for h in range(p.size) if p[h] > 0]
    if not live:
        return 0.0
    deadline = time.monotonic() + time_limit
    # Sets of hypotheses are bit masks (bit h for hypothesis h): a test splits a set by ANDing it
    # with the mask of each of its outcomes, and a set's total and largest prior are read from
    # per-byte tables, so that a node of the search costs a few integer operations per test.
    splits = []
    for t in range(out.shape[1]):
        by_outcome: dict[int, int] = {}
        for h in live:
            k = int(out[h, t])
            by_outcome[k] = by_outcome.get(k, 0) | (1 << h)
        splits.append(tuple(by_outcome.values()))
    total_of = _byte_tables(p, sum)
    largest_of = _byte_tables(p, max)
    paid = [float(c[t]) for t in range(out.shape[1])]
    memo: dict[tuple[int, frozenset[str]], float] = {}

    def value(members: int, made: frozenset[str]) -> float:
        found = memo.get((members, made))
        if found is not None:
            return found
        if time.monotonic() > deadline:
            raise _OutOfTime
        total = total_of(members)
        best = 0.0
        if largest_of(members) < threshold * total:
            best = float("inf")
            for t, masks in enumerate(splits):
                parts = [members & m for m in masks if members & m]
                cost = paid[t] + sum(m for ref, m in needs[t] if ref not in made)
                if len(parts) < 2 or cost >= best:
                    continue
                after = made | {ref for ref, _ in needs[t]} if needs[t] else made
                for part in parts:
                    cost += total_of(part) / total * value(part, after)
                    if cost >= best:
                        break
                best = min(best, cost)
            if best == float("inf"):
                best = 0.0  # no test splits the set: stop
        memo[(members, made)] = best
        return best

    try:
        return value(sum(1 << h for h in live), frozenset())
    except _OutOfTime:
        return None
    except RecursionError:  # pragma: no cover - sets too deep to search
        return None


def _byte_tables(p: np.ndarray, combine: Callable[[list[float]], float]) -> Callable[[int], float]:
    """``combine`` (sum or max) of the priors of the hypotheses in a bit mask, from tables of
    every byte's 256 values (0 for an empty set)."""
    tables = []
    for start in range(0, p.size, 8):
        chunk = [float(x) for x in p[start:start + 8]]
        tables.append([combine([chunk[i] for i in range(len(chunk)) if b >> i & 1] or [0.0])
                       for b in range(256)])

    seen: dict[int, float] = {}

    def of(mask: int) -> float:
        found = seen.get(mask)
        if found is None:
            found = seen[mask] = combine([table[(mask >> (8 * j)) & 255] for j, table in enumerate(tables)])
        return found

    return of


def noise_free_outcomes(model: EvidenceModel) -> np.ndarray:
    """The one outcome per hypothesis and test of a noise-free evidence model, shape (H, T)."""
    return np.stack([np.argmax(o.probs, axis=1) for o in model.tests], axis=1)


# --------------------------------------------------------------------------- the trade's walks


def voltage_path(ruleset: Ruleset, table: PredictionTable) -> list[int]:
    """Voltage tests in order of distance from the supply (nearest first), by hops in the netlist;
    one per test point, in the operating state most of them use."""
    start = ruleset.power
    if start is None:
        battery = next((comp for comp in ruleset.components if comp.type == "battery"), None)
        start = battery.nodes[0] if battery else None
    adjacency: dict[str, set[str]] = {}
    for comp in ruleset.components:
        for a in comp.nodes:
            for b in comp.nodes:
                if a != b:
                    adjacency.setdefault(a, set()).add(b)
    distance: dict[str, int] = {}
    if start is not None:
        distance[start] = 0
        queue = deque([start])
        while queue:
            node = queue.popleft()
            for nxt in sorted(adjacency.get(node, ())):
                if nxt not in distance and nxt != ruleset.ground:
                    distance[nxt] = distance[node] + 1
                    queue.append(nxt)
    voltage = [t for t in ruleset.tests if isinstance(t, VoltageTest) and t.reference in (None, ruleset.ground)
               and t.instrument == "meter"]
    states = [t.state for t in voltage]
    # the state the walk is made in: the commonest, the first in ruleset order on a tie (a set here
    # made the walk depend on the string-hash seed of the process)
    working = max(dict.fromkeys(states), key=states.count) if states else None
    chosen: dict[str, VoltageTest] = {}
    for test in voltage:  # one test per point, in the working state where there is a choice
        if test.at not in chosen or (test.state == working and chosen[test.at].state != working):
            chosen[test.at] = test
    points = []
    for test in chosen.values():
        try:
            index = table.test_index(test.id)
        except KeyError:
            continue
        points.append((distance.get(test.at, 10**6), index))
    points.sort()
    return [index for _, index in points]


def healthy_interval(table: PredictionTable, t: int, none_index: int = 0) -> tuple[float, float]:
    """The readings test ``t`` counts as good: the no-fault samples widened by the meter's uncertainty."""
    x = np.asarray(table.samples[none_index, t, :], dtype=float)
    fin = np.isfinite(x)
    if not fin.any():
        return (float("inf"), float("inf"))
    sig = float(np.nanmax(table.sigma[none_index, t, :][fin])) if fin.any() else 0.0
    res = float(np.nanmax(table.resolution[none_index, t, :][fin]))
    pad = GOOD_SIGMAS * sig + res
    return float(x[fin].min()) - pad, float(x[fin].max()) + pad


def is_good(table: PredictionTable, t: int, reading: Reading) -> bool:
    """Whether a voltage reading lies in the healthy range."""
    lo, hi = healthy_interval(table, t)
    if reading.overload:
        return bool(np.isinf(hi))
    return reading.value is not None and lo <= reading.value <= hi


@dataclass(frozen=True)
class WalkResult:
    """The tests a walk made, in order, and the minutes they took."""

    tests: tuple[int, ...]
    minutes: float


def linear_walk(table: PredictionTable, path: Sequence[int], read: Callable[[int], Reading]) -> WalkResult:
    """From the point furthest from the supply toward it; stop at the first good point."""
    taken: list[int] = []
    for t in reversed(path):
        taken.append(t)
        if is_good(table, t, read(t)):
            break
    return WalkResult(tuple(taken), sequence_minutes(table, taken))


def half_split(table: PredictionTable, path: Sequence[int], read: Callable[[int], Reading]) -> WalkResult:
    """Measure the middle of the stretch in doubt: good there, the fault is beyond; bad, before."""
    taken: list[int] = []
    lo, hi = -1, len(path)  # the supply is good; past the last point is taken as bad
    while hi - lo > 1:
        mid = (lo + hi) // 2
        t = path[mid]
        taken.append(t)
        if is_good(table, t, read(t)):
            lo = mid
        else:
            hi = mid
    return WalkResult(tuple(taken), sequence_minutes(table, taken))


def walk_readings(draws: Mapping[int, Reading]) -> Callable[[int], Reading]:
    """A reading source over pre-drawn readings."""
    return lambda t: draws[t]
