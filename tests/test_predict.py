"""predict(): the PredictionTable of the stop-lamp ruleset, its summary, its cache and the CLI."""

from __future__ import annotations

import json
from pathlib import Path

import numpy as np
import pytest

import assistant.predict as predict_module
from assistant.cli import main
from assistant.meter import default_meter
from assistant.predict import predict, summarise
from assistant.ruleset.defaults import fault_list
from assistant.ruleset.load import load_ruleset

ROOT = Path(__file__).resolve().parents[1]
STOP_LAMPS = ROOT / "rulesets" / "lamp" / "stop_lamps.yaml"
SAMPLES = 32


@pytest.fixture(autouse=True)
def _cache(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> Path:
    folder = tmp_path / "cache"
    monkeypatch.setenv("OHMTRAIL_CACHE", str(folder))
    return folder


@pytest.fixture(scope="module")
def loaded():  # type: ignore[no-untyped-def]
    return load_ruleset(STOP_LAMPS)


@pytest.fixture(scope="module")
def table(loaded):  # type: ignore[no-untyped-def]
    return predict(loaded, samples=SAMPLES, cache=False)


def test_table_shape_and_hypothesis_order(loaded, table) -> None:  # type: ignore[no-untyped-def]
    faults = fault_list(loaded.ruleset)
    assert [h.id for h in table.hypotheses] == ["none"] + [f.id for f in faults]
    assert [t.id for t in table.tests] == [t.id for t in loaded.ruleset.tests]
    H, T = len(table.hypotheses), len(table.tests)
    assert table.samples.shape == table.sigma.shape == table.resolution.shape == (H, T, SAMPLES)
    assert sum(h.prior for h in table.hypotheses) == pytest.approx(1.0)
    total = loaded.ruleset.none_weight + sum(f.weight for f in faults)
    assert table.hypotheses[0].prior == pytest.approx(loaded.ruleset.none_weight / total)
    assert table.ruleset_sha256 == loaded.sha256
    meter_tests = [t for t, info in enumerate(table.tests) if info.kind != "observation"]
    assert np.isfinite(table.sigma[:, meter_tests]).all() and (table.sigma[:, meter_tests] > 0).all()
    assert not np.isnan(table.samples[:, meter_tests]).any()


def test_pairs_are_appended_with_the_product_of_priors(loaded, table) -> None:  # type: ignore[no-untyped-def]
    both = predict(loaded, samples=4, pairs=[("lamp_left.filament_open", "g_rear.high_resistance")], cache=False)
    pair = both.hypotheses[-1]
    assert pair.id == "lamp_left.filament_open+g_rear.high_resistance"
    single = {h.id: h.prior for h in table.hypotheses}
    assert pair.prior == pytest.approx(single["lamp_left.filament_open"] * single["g_rear.high_resistance"])
    # left lamp out and the rear ground corroded: no current in the left lamp
    assert (both.samples[-1, both.test_index("i_left")] == 0).all()


def test_deterministic_for_a_seed(loaded) -> None:  # type: ignore[no-untyped-def]
    a = predict(loaded, samples=8, seed=5, cache=False)
    b = predict(loaded, samples=8, seed=5, cache=False)
    c = predict(loaded, samples=8, seed=6, cache=False)
    assert np.array_equal(a.samples, b.samples, equal_nan=True)
    assert not np.array_equal(a.samples, c.samples, equal_nan=True)


def test_healthy_feed_and_ground_side_drops_under_half_a_volt(table) -> None:  # type: ignore[no-untyped-def]
    # common practice: a loaded 12 V circuit drops at most 0.5 V on its whole feed side and at
    # most 0.5 V on its whole ground side; every sample of the healthy circuit must comply
    none = table.hypothesis_index("none")
    for test in ("drop_feed", "drop_left_ground", "drop_right_ground", "drop_rear_ground"):
        assert table.samples[none, table.test_index(test)].max() < 0.5, test


def test_acceptance_feed_voltage_and_an_open_feed(loaded, table) -> None:  # type: ignore[no-untyped-def]
    summary = summarise(table)
    battery = next(c for c in loaded.ruleset.components if c.type == "battery").nominal_emf
    for test in ("v_left_feed", "v_right_feed", "v_high_feed"):
        assert battery - summary["none"][test]["median"] < 0.6  # within a few tenths of the battery
    # an open in the feed path reads near 0 V beyond it, and the battery's voltage before it
    for fault in ("w_front.open", "c40.open", "pedal_switch.stuck_open", "f12.blown"):
        for test in ("v_splice", "v_left_feed", "v_right_feed", "v_high_feed"):
            assert summary[fault][test]["high"] < 0.05, (fault, test)
    assert summary["w_front.open"]["v_switch_out"]["median"] == pytest.approx(battery, abs=0.1)


def test_summary_shape_and_ol(table) -> None:  # type: ignore[no-untyped-def]
    summary = summarise(table)
    assert set(summary) == {h.id for h in table.hypotheses}
    for row in summary.values():
        assert set(row) == {t.id for t in table.tests}
        for test in table.tests:
            cell = row[test.id]
            assert {"median", "low", "high", "unit"} <= set(cell)
            if test.kind != "observation" and "OL" not in (cell["low"], cell["high"]):
                assert cell["low"] <= cell["median"] <= cell["high"]
    assert summary["lamp_left.filament_open"]["r_left_lamp"]["median"] == "OL"
    assert summary["f12.blown"]["look_fuse"]["median"] == "yes"
    assert summary["none"]["look_fuse"]["p"] == {"yes": 0.01, "no": 0.99}


def test_cache_makes_a_second_run_read_the_disk(loaded, _cache: Path, monkeypatch: pytest.MonkeyPatch) -> None:  # type: ignore[no-untyped-def]
    first = predict(loaded, samples=4)
    assert len(list(_cache.glob("*.npz"))) == 1

    def refuse(*args, **kwargs):  # type: ignore[no-untyped-def]
        raise AssertionError("computed again instead of reading the cache")

    monkeypatch.setattr(predict_module, "compute_table", refuse)
    second = predict(loaded, samples=4)
    assert np.array_equal(first.samples, second.samples, equal_nan=True)
    assert second.hypotheses == first.hypotheses and second.tests == first.tests
    assert all(np.array_equal(first.observations[t], second.observations[t]) for t in first.observations)
    with pytest.raises(AssertionError, match="computed again"):
        predict(loaded, samples=5)  # other arguments: another key


def test_unreadable_cache_is_recomputed(loaded, _cache: Path) -> None:  # type: ignore[no-untyped-def]
    predict(loaded, samples=4)
    (entry,) = _cache.glob("*.npz")
    entry.write_bytes(b"not a cache file")
    again = predict(loaded, samples=4)
    assert again.samples.shape[2] == 4


def test_cli_predict_json_shape(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["predict", str(STOP_LAMPS), "--json", "--samples", "16"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["ruleset"] == "stop_lamps"
    assert doc["faults"][0]["id"] == "none"
    assert all({"id", "component", "mode", "prior"} <= set(f) for f in doc["faults"])
    assert all({"id", "kind", "unit", "cost_minutes"} <= set(t) for t in doc["tests"])
    test_ids = {t["id"] for t in doc["tests"]}
    assert set(doc["predictions"]) == {f["id"] for f in doc["faults"]}
    for row in doc["predictions"].values():
        assert set(row) == test_ids
        for cell in row.values():
            assert {"median", "low", "high", "unit"} <= set(cell)
    assert doc["predictions"]["lamp_left.filament_open"]["r_left_lamp"]["high"] == "OL"


def test_cli_predict_text_and_one_fault(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["predict", str(STOP_LAMPS), "--samples", "8"]) == 0
    out = capsys.readouterr().out
    assert "g_rear.high_resistance" in out and "v_left_feed" in out
    assert main(["predict", str(STOP_LAMPS), "--samples", "8", "--fault", "c40.open", "--json"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert set(doc["predictions"]) == {"none", "c40.open"}


def test_cli_predict_bad_input_is_one_line(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["predict", str(STOP_LAMPS), "--fault", "no_such.fault", "--samples", "2"]) == 1
    err = capsys.readouterr().err.strip()
    assert "no_such.fault" in err and "\n" not in err
    bad_meter = tmp_path / "meter.yaml"
    bad_meter.write_text((ROOT / "assistant" / "data" / "meter_default.yaml").read_text()
                         .replace("input_resistance: 10 Mohm", "input_resistance: ten"))
    assert main(["predict", str(STOP_LAMPS), "--meter", str(bad_meter)]) == 1
    err = capsys.readouterr().err.strip()
    assert err.startswith(f"{bad_meter}:8:") and "\n" not in err
    assert main(["predict", str(tmp_path / "missing.yaml")]) == 1
    assert "no such file" in capsys.readouterr().err


def test_default_samples_keep_the_meter_default(loaded) -> None:  # type: ignore[no-untyped-def]
    # the default meter is used when none is given, and its profile is part of the cache key
    t = predict(loaded, samples=2, cache=False)
    other = default_meter().model_copy(update={"name": "another meter"})
    assert predict_module._cache_key(loaded, default_meter(), 2, 0, ()) != predict_module._cache_key(
        loaded, other, 2, 0, ())
    assert t.samples.shape[2] == 2


def test_hypotheses_in_groups_give_the_same_table(loaded, monkeypatch: pytest.MonkeyPatch) -> None:  # type: ignore[no-untyped-def]
    # large harnesses are solved a few hypotheses at a time; the table must not depend on it
    whole = predict_module.compute_table(loaded, default_meter(), samples=4)
    monkeypatch.setattr(predict_module, "GROUP_NODE_VARIANTS", 4 * 15 * 3 * 10)
    grouped = predict_module.compute_table(loaded, default_meter(), samples=4)
    assert np.array_equal(whole.samples, grouped.samples, equal_nan=True)
    assert np.array_equal(whole.sigma, grouped.sigma, equal_nan=True)
