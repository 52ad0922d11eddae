"""`ohmtrail coverage`: ambiguity groups, minutes to isolate, idle tests, complaints and states."""

from __future__ import annotations

import json
from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pytest

from assistant.cli import main
from assistant.coverage import ambiguity_groups, separation_matrix
from assistant.predict import Hypothesis, PredictionTable
from assistant.ruleset import load_ruleset
from assistant.predict import TestInfo as Info

STOP_LAMPS = "rulesets/lamp/stop_lamps.yaml"


@pytest.fixture(scope="module", autouse=True)
def _own_cache(tmp_path_factory: pytest.TempPathFactory) -> Iterator[None]:
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("OHMTRAIL_CACHE", str(tmp_path_factory.mktemp("cache")))
        yield


def _table(samples: dict[str, list[list[float]]], observations: dict[int, list[list[float]]] | None = None,
           units: tuple[str, ...] = ("V",)) -> PredictionTable:
    """A hand-made table: hypothesis -> per test a list of sampled displays."""
    ids = list(samples)
    hyps = tuple(Hypothesis(h, () if h == "none" else (h,), 1 / len(ids), "", 1.0) for h in ids)
    arr = np.array([samples[h] for h in ids], dtype=float)  # (H, T, S)
    tests = tuple(Info(f"t{i}", "voltage" if u else "observation", u, 1.0, None,
                           () if u else ("yes", "no")) for i, u in enumerate(units))
    obs = {t: np.array(rows) for t, rows in (observations or {}).items()}
    return PredictionTable("hand", "0" * 64, hyps, tests, arr, np.full(arr.shape, 0.01), np.full(arr.shape, 0.01), obs)


def test_separation_on_a_hand_made_table() -> None:
    # readings about 12.6 V under none and a.open; about 0 V under b.open: t0 tells b.open from
    # both, nothing tells none from a.open. t1 reads the same under all three.
    table = _table({
        "none": [[12.6, 12.61, 12.59, 12.6], [5.0, 5.0, 5.0, 5.0]],
        "a.open": [[12.6, 12.6, 12.62, 12.58], [5.0, 5.0, 5.0, 5.0]],
        "b.open": [[0.0, 0.0, 0.01, 0.0], [5.0, 5.0, 5.0, 5.0]],
    }, units=("V", "V"))
    sep = separation_matrix(table)
    assert sep[0, 0, 2] > 0.99 and sep[0, 1, 2] > 0.99  # 12.6 V against 0 V
    assert sep[0, 0, 1] < 0.25  # the same readings within the meter's noise
    assert np.allclose(sep, sep.transpose(0, 2, 1))
    assert (sep[1] < 1e-9).all()
    groups, partners, useless = ambiguity_groups(table)
    assert groups == (("none", "a.open"),)
    assert partners["b.open"] == () and partners["none"] == ("a.open",)
    assert useless == ("t1",)


def test_overload_readings_and_observations_separate() -> None:
    inf = float("inf")
    table = _table({
        "none": [[0.7, 0.72, 0.69, 0.71], [np.nan] * 4],
        "lamp.filament_open": [[inf, inf, inf, inf], [np.nan] * 4],
        "fuse.blown": [[0.7, 0.7, 0.71, 0.7], [np.nan] * 4],
    }, observations={1: [[0.01, 0.99], [0.01, 0.99], [0.95, 0.05]]}, units=("ohm", ""))
    sep = separation_matrix(table)
    assert sep[0, 0, 1] == pytest.approx(1.0)  # OL against a finite reading
    assert sep[1, 0, 2] == pytest.approx(0.94)  # total variation of the outcome rows: |0.01-0.95|
    assert sep[1, 0, 1] == pytest.approx(0.0)
    assert ambiguity_groups(table)[0] == ()


def test_json_lists_groups_and_minutes_for_every_fault(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["coverage", STOP_LAMPS, "--json", "--runs", "2"]) == 0
    data = json.loads(capsys.readouterr().out)
    assert data["coverage"] == 1 and data["ruleset"]["id"] == "stop_lamps"
    ids = [f["id"] for f in data["faults"]]
    assert ids[0] == "none" and "lamp_left.filament_open" in ids
    for fault in data["faults"]:
        assert fault["expected_minutes"] is None or fault["expected_minutes"] >= 0
        assert fault["isolable"] == (fault["group"] is None)
        if fault["group"] is not None:
            assert fault["id"] in data["ambiguity_groups"][fault["group"]]
    assert all(m for m in (f["expected_minutes"] for f in data["faults"] if f["prior"] > 0))
    in_groups = [h for g in data["ambiguity_groups"] for h in g]
    assert len(in_groups) == len(set(in_groups))  # a hypothesis is in one group at most
    rs = load_ruleset(STOP_LAMPS).ruleset
    test_ids = [t.id for t in rs.tests]
    assert {t["id"] for t in data["tests_never_deciding"]} <= set(test_ids)
    assert all(t["reason"] for t in data["tests_never_deciding"])
    states = {s["id"]: s["tests"] for s in data["states"]}
    assert set(states) == set(rs.states)
    assert states["pedal_pressed"] and "v_left_feed" in states["pedal_pressed"]
    assert sorted(t for tests in states.values() for t in tests) + data["tests_without_state"] != []
    assert sorted([t for tests in states.values() for t in tests] + data["tests_without_state"]) == sorted(test_ids)
    # a left-lamp fault is led to by the complaints naming the left lamp (or naming no suspects)
    left = next(f for f in data["faults"] if f["id"] == "lamp_left.filament_open")
    assert "left_out" in left["complaints"]
    assert set(data["faults_without_complaint"]).isdisjoint(
        c for f in data["faults"] if f["complaints"] for c in [f["id"]])
    # every fault with a prior has a floor; its tests and preparations are the ruleset's, and each
    # test's preparations are among those listed; the weighted floor is the prior-weighted mean
    costs = {t.id: t.cost for t in rs.tests}
    needs = {t.id: set(t.prepare) for t in rs.tests}
    weighted = 0.0
    for fault in data["faults"]:
        assert fault["floor_minutes"] is not None and fault["floor_minutes"] >= 0
        assert set(fault["floor_tests"]) <= set(test_ids)
        assert set(fault["floor_only"]) == set(fault["floor_tests"])
        assert all(set(twins) <= set(ids) - {fault["id"]} for twins in fault["floor_only"].values())
        made = set(fault["floor_preparations"])
        assert all(needs[t] <= made for t in fault["floor_tests"])
        assert fault["floor_minutes"] == pytest.approx(
            sum(costs[t] for t in fault["floor_tests"]) + sum(rs.preparations[r].cost for r in made))
        weighted += fault["prior"] * fault["floor_minutes"]
    assert data["weighted_floor_minutes"] == pytest.approx(weighted / sum(f["prior"] for f in data["faults"]))


def test_human_view_and_no_simulation(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["coverage", STOP_LAMPS, "--runs", "0"]) == 0
    out = capsys.readouterr().out
    assert "no simulation" in out and "ambiguity groups" in out and "states the tests need:" in out


def test_bad_options_are_one_line(capsys: pytest.CaptureFixture[str], tmp_path: Path) -> None:
    with pytest.raises(SystemExit):
        main(["coverage", STOP_LAMPS, "--separation", "2"])
    assert "must be a fraction" in capsys.readouterr().err
    assert main(["coverage", str(tmp_path / "nope.yaml")]) == 1
    assert capsys.readouterr().err.count("\n") == 1


def test_each_run_is_one_vehicle_from_the_vehicles_table() -> None:
    """isolation_minutes draws every reading of a run from one Monte Carlo sample of the
    ``vehicles`` table (one simulated vehicle), as ``ohmtrail simulate`` does."""
    from dataclasses import replace

    from assistant.coverage import isolation_minutes
    from assistant.diagnosis import Context
    from assistant.simulate import draw_reading
    from synthetic_tables import tiny_lamp

    loaded, table = tiny_lamp()
    vehicles = replace(table, samples=table.samples.copy())
    seen: list[tuple[int, int | None]] = []

    def spy(source, h, t, rng, *, sample=None):  # type: ignore[no-untyped-def]
        seen.append((id(source), sample))
        return draw_reading(source, h, t, rng, sample=sample)

    h = table.hypothesis_index("fuse.blown")
    isolation_minutes(loaded, table, h, 1, 2, spy, Context(), vehicles=vehicles)
    assert len(seen) > 1 and {s for s, _ in seen} == {id(vehicles)}
    assert len({sample for _, sample in seen}) == 1 and seen[0][1] is not None  # one run: one vehicle
    seen.clear()
    isolation_minutes(loaded, table, h, 5, 2, spy, Context(), vehicles=vehicles)
    assert len({sample for _, sample in seen}) > 1  # five vehicles, not one


def test_coverage_scores_on_the_vehicles_it_is_given() -> None:
    """With vehicles that are all healthy, only "none" is ever concluded right."""
    from dataclasses import replace

    from assistant.coverage import coverage
    from synthetic_tables import all_healthy, tiny_lamp

    loaded, table = tiny_lamp()
    right = {f.id: f.concluded_right for f in coverage(loaded, table, runs=3, vehicles=all_healthy(table)).faults
             if f.concluded_right is not None}
    assert right["none"] == 1.0 and max(r for h, r in right.items() if h != "none") == 0.0
    mismatched = replace(table, hypotheses=table.hypotheses[:-1], samples=table.samples[:-1])
    with pytest.raises(ValueError, match="same hypotheses and tests"):
        coverage(loaded, table, runs=1, vehicles=mismatched)


def test_the_authoring_guide_excerpt_is_what_coverage_prints(capsys: pytest.CaptureFixture[str]) -> None:
    """docs/authoring.md shows an excerpt of `coverage --json` on its worked example
    (docs/examples/cv2_plate_lamps.yaml): the same keys as the command prints, and the faults,
    groups and state it shows as the command gives them (priors to four places, the weighted
    minutes to two), so that the guide stays true to the code."""
    root = Path(__file__).resolve().parent.parent
    guide = (root / "docs" / "authoring.md").read_text(encoding="utf-8")
    start = guide.index("```json\n", guide.index("The JSON (`--json`) has this shape")) + len("```json\n")
    shown = json.loads(guide[start:guide.index("```\n", start)])
    example = str(root / "docs" / "examples" / "cv2_plate_lamps.yaml")
    assert main(["check", example]) == 0  # the example's two cases pass, as the guide says
    assert "2 cases in 1 ruleset: 2 passed, 0 failed" in capsys.readouterr().out
    assert main(["coverage", example, "--runs", "4", "--json"]) == 0
    printed = json.loads(capsys.readouterr().out)
    assert list(shown) == list(printed)
    assert printed["ruleset"]["sha256"].startswith(shown["ruleset"]["sha256"].rstrip("."))
    assert shown["settings"] == printed["settings"]
    by_id = {f["id"]: f for f in printed["faults"]}
    assert len(shown["faults"]) == 2
    for fault in shown["faults"]:
        actual = dict(by_id[fault["id"]], prior=round(by_id[fault["id"]]["prior"], 4))
        assert fault == actual, fault["id"]
    assert shown["ambiguity_groups"] == printed["ambiguity_groups"][:len(shown["ambiguity_groups"])]
    assert shown["states"] == printed["states"][:len(shown["states"])]
    for key in ("weighted_expected_minutes", "weighted_floor_minutes"):
        assert shown[key] == round(printed[key], 2), key
    for key in ("coverage", "tests_never_deciding", "faults_without_complaint", "tests_without_state"):
        assert shown[key] == printed[key], key


def test_coverage_names_the_looks_answered_by_hand_written_rows(capsys: pytest.CaptureFixture[str]) -> None:
    # the starter's relay click follows the circuit (seen); its sounds at the key are rows
    assert main(["coverage", "rulesets/starter/starter.yaml", "--runs", "0", "--json"]) == 0
    looks = json.loads(capsys.readouterr().out)["looks_with_rows"]
    loaded = load_ruleset("rulesets/starter/starter.yaml")
    rows = [t.id for t in loaded.ruleset.tests if t.kind == "observation" and t.seen is None]
    assert looks == rows and "listen_solenoid" in looks and "listen_k8" not in looks
    assert main(["coverage", "rulesets/starter/starter.yaml", "--runs", "0"]) == 0
    assert "looks answered by hand-written rows" in capsys.readouterr().out
