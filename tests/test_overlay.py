"""Priors overlays: loading, located errors, stacking, the file beside the ruleset."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from assistant.errors import RulesetError
from assistant.overlay import beside_path, load_overlay, overlay_document
from assistant.ruleset import fault_list, load_ruleset

STOP_LAMPS = Path("rulesets/lamp/stop_lamps.yaml")


def _weights(loaded) -> dict[str, float]:  # type: ignore[no-untyped-def]
    return {f.id: f.weight for f in fault_list(loaded.ruleset)}


@pytest.fixture()
def ruleset(tmp_path: Path) -> Path:
    target = tmp_path / "stop_lamps.yaml"
    shutil.copy(STOP_LAMPS, target)
    return target


def _write(path: Path, text: str) -> Path:
    path.write_text(text, encoding="utf-8")
    return path


def test_overlay_replaces_weights_and_keeps_the_rest(ruleset: Path, tmp_path: Path) -> None:
    before = load_ruleset(ruleset)
    ov = _write(tmp_path / "a.yaml", "overlay: 1\nruleset: stop_lamps\nnone_weight: 0.5\n"
                "weights:\n  lamp_left.filament_open: 9\n  pedal_switch.stuck_closed: 0\n")
    after = load_ruleset(ruleset, [ov])
    w0, w1 = _weights(before), _weights(after)
    assert w1["lamp_left.filament_open"] == 9.0
    assert "pedal_switch.stuck_closed" not in w1  # weight 0 switches the mode off
    assert {k: v for k, v in w1.items() if k != "lamp_left.filament_open"} == {
        k: v for k, v in w0.items() if k not in ("lamp_left.filament_open", "pedal_switch.stuck_closed")}
    assert after.ruleset.none_weight == 0.5
    # the repair and range of a fault survive a weight change
    lamp = next(c for c in after.ruleset.components if c.id == "lamp_left")
    assert lamp.faults["high_resistance"].weight == 1.2
    assert after.sha256 == before.sha256  # still the ruleset file's own hash
    assert after.content_sha256 != before.content_sha256
    assert after.overlays == (f"{ov} sha256:{load_overlay(ov).sha256}",)
    assert ruleset.read_text(encoding="utf-8") == STOP_LAMPS.read_text(encoding="utf-8")


def test_overlays_stack_later_wins_and_beside_comes_first(ruleset: Path, tmp_path: Path) -> None:
    beside = _write(beside_path(ruleset), "overlay: 1\nruleset: stop_lamps\nweights:\n"
                    "  g_rear.high_resistance: 7\n  f12.blown: 3\n")
    assert beside.name == "stop_lamps.overlay.yaml"
    extra = _write(tmp_path / "extra.yaml", "overlay: 1\nruleset: stop_lamps\nweights:\n  f12.blown: 0.25\n")
    stacked = load_ruleset(ruleset, [extra])
    w = _weights(stacked)
    assert w["g_rear.high_resistance"] == 7.0 and w["f12.blown"] == 0.25
    assert [o.split(" ")[0] for o in stacked.overlays] == [str(beside), str(extra)]
    plain = load_ruleset(ruleset, beside=False)
    assert plain.overlays == () and _weights(plain)["f12.blown"] == 1.5


def test_overlay_document_round_trips(ruleset: Path, tmp_path: Path) -> None:
    loaded = load_ruleset(ruleset)
    weights = {"lamp_left.filament_open": 12.3456789, "c40.open": 0.01}
    text = overlay_document(loaded.ruleset, weights, ruleset_sha256=loaded.sha256, note='from "h.csv"')
    ov = _write(tmp_path / "o.yaml", text)
    w = _weights(load_ruleset(ruleset, [ov]))
    assert w["lamp_left.filament_open"] == pytest.approx(12.3457) and w["c40.open"] == 0.01


@pytest.mark.parametrize("text, line, needle", [
    # (overlay text, line of the error, part of the message)
    ("overlay: 1\nruleset: starter\nweights: {}\n", 2, "overlay is for ruleset 'starter'"),
    ("overlay: 1\nruleset: stop_lamps\nweights:\n  lamp_lef.filament_open: 2\n", 4, "unknown component 'lamp_lef'"),
    ("overlay: 1\nruleset: stop_lamps\nweights:\n  lamp_left.seized: 2\n", 4, "cannot have fault mode 'seized'"),
    ("overlay: 1\nruleset: stop_lamps\nweights:\n  lamp_left.filament_open: -2\n", 4, "greater than or equal to 0"),
    ("overlay: 1\nruleset: stop_lamps\nweights:\n  lamp_left: 2\n", 4, "String should match pattern"),
    ("overlay: 1\nruleset: stop_lamps\nweight:\n  lamp_left.filament_open: 2\n", 3, "unknown field"),  # at the key
    ("overlay: 2\nruleset: stop_lamps\n", 1, "overlay"),
    ("overlay: 1\nruleset: stop_lamps\nweights:\n  f12.blown: 1\n  f12.blown: 2\n", 5, "duplicate key"),
    ("- just a list\n", 1, "an overlay is a YAML mapping"),
    ("", 1, "is empty"),
])
def test_bad_overlays_are_located(ruleset: Path, tmp_path: Path, text: str, line: int, needle: str) -> None:
    ov = _write(tmp_path / "bad.yaml", text)
    with pytest.raises(RulesetError) as info:
        load_ruleset(ruleset, [ov])
    err = info.value
    assert err.file == str(ov)
    assert err.line == line
    assert needle in str(err)


def test_missing_overlay_file_is_an_error(ruleset: Path, tmp_path: Path) -> None:
    with pytest.raises(RulesetError, match="no such file"):
        load_ruleset(ruleset, [tmp_path / "nope.yaml"])


def test_lint_skips_overlay_files_but_checks_the_overlay_in_force(ruleset: Path) -> None:
    from assistant.ruleset import lint_paths

    _write(beside_path(ruleset), "overlay: 1\nruleset: stop_lamps\nweights:\n  nothing_here.open: 1\n")
    result = lint_paths([ruleset.parent])
    assert result.files == 1  # the overlay is not taken for a ruleset
    assert len(result.problems) == 1 and "unknown component 'nothing_here'" in result.problems[0].message


def test_apply_priors_recomputes_the_table_priors(ruleset: Path, tmp_path: Path) -> None:
    import numpy as np

    from assistant.overlay import apply_priors
    from assistant.predict import Hypothesis, PredictionTable

    ov = _write(tmp_path / "a.yaml", "overlay: 1\nruleset: stop_lamps\nnone_weight: 1\n"
                "weights:\n  f12.blown: 5\n  c40.open: 0\n")
    loaded = load_ruleset(ruleset, [ov])
    hyps = (Hypothesis("none", (), 0.1, "", 0.0), Hypothesis("f12.blown", ("f12.blown",), 0.1, "", 5.0),
            Hypothesis("c40.open", ("c40.open",), 0.1, "", 5.0),
            Hypothesis("f12.blown+g_rear.open", ("f12.blown", "g_rear.open"), 0.01, "", 10.0))
    empty = np.zeros((4, 0, 1))
    table = PredictionTable("stop_lamps", loaded.sha256, hyps, (), empty, empty, empty)
    total = 1 + sum(f.weight for f in fault_list(loaded.ruleset))
    priors = [h.prior for h in apply_priors(table, loaded.ruleset).hypotheses]
    assert priors == pytest.approx([1 / total, 5 / total, 0.0, 5 / total * 0.5 / total])
    assert [h.prior for h in table.hypotheses] == [0.1, 0.1, 0.1, 0.01]  # the given table is unchanged
