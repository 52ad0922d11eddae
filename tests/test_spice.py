"""``ohmtrail spice``: the deck of the circuit as modelled, and its errors."""

from __future__ import annotations

from pathlib import Path

import pytest

from assistant.cli import main
from assistant.ruleset.load import load_ruleset
from assistant.spice import spice_deck

STOP_LAMPS = Path(__file__).resolve().parents[1] / "rulesets" / "lamp" / "stop_lamps.yaml"


def test_deck_holds_every_part_and_ends_with_op() -> None:
    ruleset = load_ruleset(STOP_LAMPS).ruleset
    deck = spice_deck(ruleset, ("none",), "pedal_pressed")
    text = deck.text
    assert text.rstrip().endswith(".end") and "\n.op\n" in text
    for comp in ruleset.components:
        assert f"* {comp.id}:" in text
    # the lamps are hot in an energised state: a P21W is 12^2 / 21 = 6.857 ohm (ECE R37 rating) [D]
    assert "6.857142857142857" in text


def test_fault_and_state_show_in_the_deck() -> None:
    ruleset = load_ruleset(STOP_LAMPS).ruleset
    released = spice_deck(ruleset, ("none",)).text  # first state: pedal released
    assert "* pedal_switch: SW_IN-SW_OUT open (removed)" in released
    blown = spice_deck(ruleset, ("w_front.short_to_ground",), "pedal_pressed").text
    assert "* f12: BATT_POS-F12_OUT open (removed)" in blown  # the short blew the fuse
    assert "* w_front.short_to_ground: C40_IN -> GND" in blown


def test_floating_nodes_get_a_reference(tmp_path: Path) -> None:
    ruleset = load_ruleset(STOP_LAMPS).ruleset
    deck = spice_deck(ruleset, ("f12.blown",), "released").text
    # with the fuse out and the switch open, the wire from the fuse box floats
    assert "F12_OUT floats" in deck and "Vfloat" in deck


def test_cli_spice_writes_a_file_or_stdout(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    out = tmp_path / "deck.cir"
    assert main(["spice", str(STOP_LAMPS), "--fault", "c40.high_resistance", "--state", "pedal_pressed",
                 "-o", str(out)]) == 0
    assert "c40.high_resistance" in out.read_text()
    assert "ngspice -b" in capsys.readouterr().out
    assert main(["spice", str(STOP_LAMPS)]) == 0
    assert capsys.readouterr().out.startswith("* ohmtrail: ruleset stop_lamps")


def test_cli_spice_errors_are_one_line(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["spice", str(STOP_LAMPS), "--fault", "nope.open"]) == 1
    err = capsys.readouterr().err.strip()
    assert "nope.open" in err and "\n" not in err
    assert main(["spice", str(STOP_LAMPS), "--state", "parked"]) == 1
    assert "parked" in capsys.readouterr().err
    assert main(["spice", str(STOP_LAMPS), "-o", str(tmp_path / "no" / "such" / "dir" / "x.cir")]) == 1
    assert "cannot be written" in capsys.readouterr().err
