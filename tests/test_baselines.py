"""Baselines: the exact optimum against Huffman and P-over-C, and the trade's two walks."""

from __future__ import annotations

import heapq
import itertools
import os
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from assistant.baselines import half_split, linear_walk, optimal_cost, voltage_path
from assistant.reading import Reading
from assistant.ruleset import load_ruleset
from synthetic_tables import build_table, flat_table, hypotheses_of, infos_of

STOP_LAMPS = load_ruleset(Path(__file__).resolve().parent.parent / "rulesets" / "lamp" / "stop_lamps.yaml")


def huffman_expected_length(p: list[float]) -> float:
    """Expected code length of a binary Huffman code (Huffman 1952): the sum of merged weights."""
    heap = list(p)
    heapq.heapify(heap)
    total = 0.0
    while len(heap) > 1:
        a, b = heapq.heappop(heap), heapq.heappop(heap)
        total += a + b
        heapq.heappush(heap, a + b)
    return total


@pytest.mark.parametrize("priors", [
    [0.5, 0.25, 0.125, 0.125],  # dyadic: the Huffman code is exact, 1.75 bits
    [0.4, 0.3, 0.2, 0.1],
    [0.3, 0.25, 0.2, 0.15, 0.1],
    [0.9, 0.05, 0.03, 0.02],  # skewed
    [1 / 6] * 6,
])
def test_optimum_with_all_subset_tests_equals_huffman(priors: list[float]) -> None:
    """Reference: with every subset test at unit cost the optimum is the Huffman code's expected
    length (Huffman, "A method for the construction of minimum-redundancy codes", 1952)."""
    n = len(priors)
    subsets = [s for r in range(1, n) for s in itertools.combinations(range(n), r)]
    outcomes = np.array([[1 if h in s else 0 for s in subsets] for h in range(n)])
    got = optimal_cost(outcomes, np.array(priors), [1.0] * len(subsets), threshold=1.0)
    assert got == pytest.approx(huffman_expected_length(priors), abs=1e-12)


@pytest.mark.parametrize("seed, n", [(seed, 6) for seed in range(6)] + [(seed, 12) for seed in range(2)])
def test_optimum_with_perfect_component_tests_equals_p_over_c(seed: int, n: int) -> None:
    """Reference: independent perfect component tests, one fault or none: the optimal order is
    probability over cost, descending (Kadane & Simon, Annals of Statistics, 1977). With 12
    components the 13 hypotheses span two bytes of the search's bit masks."""
    rng = np.random.default_rng(seed)
    p = rng.dirichlet(np.ones(n + 1))  # p[0] is "no fault": every component may need its test
    c = rng.uniform(1, 10, n)
    outcomes = np.zeros((n + 1, n), dtype=int)
    for i in range(n):
        outcomes[i + 1, i] = 1  # test i shows the fault only if component i is the faulty one
    order = sorted(range(n), key=lambda i: -p[i + 1] / c[i])
    left, p_over_c = 1.0, 0.0
    for i in order:
        p_over_c += c[i] * left
        left -= p[i + 1]
    got = optimal_cost(outcomes, p, c, threshold=1.0)
    assert got == pytest.approx(p_over_c, abs=1e-9)


def test_optimum_stops_at_the_threshold_and_on_sets_no_test_splits() -> None:
    outcomes = np.array([[0], [0], [1]])
    assert optimal_cost(outcomes, np.array([0.97, 0.02, 0.01]), [5.0], threshold=0.95) == 0.0
    # hypotheses 0 and 1 never split: after the one test nothing is left to do
    assert optimal_cost(outcomes, np.array([0.4, 0.4, 0.2]), [5.0], threshold=0.95) == pytest.approx(5.0)


def test_optimum_gives_up_past_its_time_limit() -> None:
    n = 14
    subsets = [s for r in (1, 2, 3) for s in itertools.combinations(range(n), r)]
    outcomes = np.array([[1 if h in s else 0 for s in subsets] for h in range(n)])
    assert optimal_cost(outcomes, np.full(n, 1 / n), [1.0] * len(subsets), 1.0, time_limit=0.01) is None


def _stop_lamp_table():  # type: ignore[no-untyped-def]
    infos = infos_of(STOP_LAMPS)
    typical = {"voltage": (12.4, 0.05), "drop": (0.05, 0.01), "resistance": (0.6, 0.05), "current": (1.7, 0.02)}
    default = {t.id: typical[t.kind] for t in infos if t.kind in typical}
    return build_table(hypotheses_of(STOP_LAMPS), infos, {}, default=default)


def test_voltage_path_runs_from_the_supply_outward() -> None:
    table = _stop_lamp_table()
    ids = [table.tests[t].id for t in voltage_path(STOP_LAMPS.ruleset, table)]
    # the battery post, then along the feed; pedal pressed at SW_OUT
    assert ids[:5] == ["v_battery_lit", "v_fuse", "v_switch_in", "v_switch_out", "v_splice"]
    assert set(ids[5:]) == {"v_left_feed", "v_right_feed", "v_high_feed"}


def test_voltage_path_is_the_same_in_every_process() -> None:
    # The blower's voltage tests are made in speed4 and in speed1 three times each: the walk is
    # made in the first of the two in ruleset order, whatever the process's string-hash seed.
    root = Path(__file__).resolve().parent.parent
    env = {**os.environ, "PYTHONPATH": os.pathsep.join([str(root), str(root / "tests")])}
    child = [sys.executable, str(root / "tests" / "children" / "walk_path.py"), "rulesets/motor/blower.yaml"]
    printed = {subprocess.run(child, cwd=root, env={**env, "PYTHONHASHSEED": seed}, capture_output=True,
                              text=True, check=True).stdout for seed in ("1", "2", "3", "4")}
    assert len(printed) == 1
    assert "v_m_pos" in printed.pop()  # a speed4 test: speed4 comes first in the ruleset


def test_the_walk_takes_no_scan_tool_reading() -> None:
    # live data is the module's own reading, not a point the walk puts a probe on
    sensor = load_ruleset(Path(__file__).resolve().parent.parent / "rulesets" / "sensor_feed" / "sensor_reference.yaml")
    table = flat_table(sensor)
    ids = [table.tests[t].id for t in voltage_path(sensor.ruleset, table)]
    assert "v_sig_bps" in ids and not any(i.startswith("live_") for i in ids)


def _reader(table, good_upto: int, path: list[int]):  # type: ignore[no-untyped-def]
    def read(t: int) -> Reading:
        return Reading("12.40", value=12.4) if path.index(t) <= good_upto else Reading("0.00", value=0.0)
    return read


def test_linear_walk_stops_at_the_first_good_point_from_the_far_end() -> None:
    table = _stop_lamp_table()
    path = voltage_path(STOP_LAMPS.ruleset, table)
    walk = linear_walk(table, path, _reader(table, 4, path))  # good up to the splice
    assert [table.tests[t].id for t in walk.tests][-1] == "v_splice"
    assert len(walk.tests) == len(path) - 4
    assert walk.minutes == sum(table.tests[t].cost_minutes for t in walk.tests)


def test_half_split_halves_the_stretch_in_doubt() -> None:
    table = _stop_lamp_table()
    path = voltage_path(STOP_LAMPS.ruleset, table)
    for good_upto in range(-1, len(path)):
        walk = half_split(table, path, _reader(table, good_upto, path))
        assert len(walk.tests) <= int(np.ceil(np.log2(len(path) + 1)))  # 8 points, 9 stretches: 4 tests
