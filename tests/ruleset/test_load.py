"""Loading rulesets: round trips, and every kind of bad file with its line and column."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import pytest

from assistant.errors import RulesetError
from assistant.ruleset import fault_list, load_ruleset
from assistant.ruleset.model import Ruleset
from tests.conftest import STOP_LAMPS


def test_stop_lamps_loads_with_its_hash() -> None:
    loaded = load_ruleset(STOP_LAMPS)
    rs = loaded.ruleset
    assert rs.id == "stop_lamps"
    assert rs.system_voltage == 12.0
    assert len(loaded.sha256) == 64
    lamp = next(c for c in rs.components if c.id == "lamp_left")
    assert lamp.type == "lamp" and lamp.rating == 21.0
    wire = next(c for c in rs.components if c.id == "w_feed")
    assert wire.type == "wire" and wire.section == pytest.approx(1.0e-6)
    test = next(t for t in rs.tests if t.id == "look_fuse")
    assert test.kind == "observation" and test.cost == 2.0


def test_round_trip_through_python_and_json() -> None:
    rs = load_ruleset(STOP_LAMPS).ruleset
    assert Ruleset.model_validate(rs.model_dump()) == rs
    assert Ruleset.model_validate_json(rs.model_dump_json()) == rs


def test_models_are_frozen() -> None:
    rs = load_ruleset(STOP_LAMPS).ruleset
    with pytest.raises(Exception, match="frozen"):
        rs.id = "other"  # type: ignore[misc]


def test_defaults_fill_fault_modes() -> None:
    rs = load_ruleset(STOP_LAMPS).ruleset
    faults = {f.id: f for f in fault_list(rs)}
    # the author wrote only the lamp's holder weight; the type's defaults bring the rest
    assert faults["lamp_left.filament_open"].weight == 4.0
    assert faults["lamp_left.high_resistance"].weight == 1.2
    assert faults["lamp_left.high_resistance"].range_ohms == (0.5, 50.0)
    assert faults["f12.blown"].repair.startswith("Replace the fuse")
    assert faults["pedal_switch.stuck_open"].repair == "Replace or adjust the brake pedal switch"
    assert "battery.open" not in faults


def _position(text: str, mark: str) -> tuple[int, int]:
    """1-based line and column of the first occurrence of ``mark`` in ``text``."""
    offset = text.index(mark)
    line = text.count("\n", 0, offset) + 1
    col = offset - (text.rfind("\n", 0, offset) + 1) + 1
    return line, col


@pytest.mark.parametrize(
    ("old", "new", "mark", "fragment"),
    [
        # a duplicated key is an error at the second one, never "last one wins"
        ("    internal_resistance: 0.01 ohm", "    internal_resistance: 0.01 ohm\n    internal_resistance: 0.02 ohm",
         "internal_resistance: 0.02 ohm", "duplicate key: internal_resistance"),
        # a number replaced by a word
        ("    rating: 10 A ", "    rating: ten A ", "ten A", "components.1.rating: 'ten A' is not a current"),
        # a word inside a battery's EMF range: the element is named, not the validator's inner types
        ("    emf: [12.45 V, 12.65 V]", "    emf: [12.45 V, twelve V]", "twelve V",
         "components.0.emf.1: 'twelve V' is not a voltage"),
        # wrong dimension
        ("    section: 1.0 mm2", "    section: 13.5 V", "13.5 V", "is not a cross-section"),
        # a wrong type: a mapping where a text is expected
        ("title: Stop lamps, 12 V, fed through the pedal switch", "title: {a: 1}", "{a: 1}", "title:"),
        # an unknown key
        ("threshold: 0.95", "threshold: 0.95\nthreshhold: 0.9", "threshhold", "threshhold: unknown field"),
        # an unknown component type
        ("    type: connector", "    type: conector", "conector", "components.5.type: unknown type 'conector'"),
        # YAML 1.1 trap: `010` is ten in YAML 1.2, a number, not the text of a pin
        ('    pin: "7"', "    pin: 010", "010", "pin: Input should be a valid string"),
        # a semantic problem found by lint is located the same way (see test_lint.py)
    ],
)
def test_bad_files_are_located(
    write_copy: Callable[..., Path], old: str, new: str, mark: str, fragment: str
) -> None:
    path = write_copy(old, new)
    line, col = _position(path.read_text(encoding="utf-8"), mark)
    with pytest.raises(RulesetError) as info:
        load_ruleset(path)
    err = info.value
    assert fragment in str(err)
    assert (err.file, err.line, err.column) == (str(path), line, col)
    assert str(err).startswith(f"{path}:{line}:{col}: ")


def test_broken_yaml_is_located_near_the_break(write_copy: Callable[..., Path]) -> None:
    path = write_copy("    nodes: [F12_OUT, SW_IN]", "    nodes: [F12_OUT, SW_IN")
    line, _ = _position(path.read_text(encoding="utf-8"), "[F12_OUT, SW_IN")
    with pytest.raises(RulesetError) as info:
        load_ruleset(path)
    assert str(info.value).startswith(f"{path}:")
    assert "YAML:" in str(info.value)
    assert info.value.line is not None and line <= info.value.line <= line + 2


def test_yaml_no_stays_text(write_copy: Callable[..., Path]) -> None:
    # YAML 1.1 would read `no` as false; in 1.2 it is the text "no", a valid outcome name.
    path = write_copy('f12.blown: {"yes": 0.95, "no": 0.05}', "f12.blown: {yes: 0.95, no: 0.05}")
    rs = load_ruleset(path).ruleset
    look = next(t for t in rs.tests if t.id == "look_fuse")
    assert look.likelihoods["f12.blown"] == {"yes": 0.95, "no": 0.05}


@pytest.mark.parametrize(
    ("content", "fragment", "line"),
    [
        (b"", "is empty", 1),
        (b"   \n\n", "is empty", 1),
        (b"\x00\x01\x02binary", "binary file", 1),
        (b"id: x\ntitle: \xff\xfe\n", "not UTF-8", 2),
        (b"- just\n- a list\n", "a ruleset is a YAML mapping", 1),
        (b"id: !!python/object:os.system x\n", "YAML", 1),
        (b"date: 2024-01-05\n", "a date is not expected", 1),
        (b"id: x\ntitle: [unclosed\n", "YAML:", 3),
    ],
)
def test_bad_bytes(tmp_path: Path, content: bytes, fragment: str, line: int) -> None:
    path = tmp_path / "bad.yaml"
    path.write_bytes(content)
    with pytest.raises(RulesetError) as info:
        load_ruleset(path)
    assert fragment in str(info.value)
    assert info.value.line == line


def test_missing_and_folder(tmp_path: Path) -> None:
    with pytest.raises(RulesetError, match="no such file"):
        load_ruleset(tmp_path / "absent.yaml")
    with pytest.raises(RulesetError, match="is a folder"):
        load_ruleset(tmp_path)


def test_every_schema_problem_is_reported(write_copy: Callable[..., Path]) -> None:
    path = write_copy(text="format: 1\nid: x\n")
    with pytest.raises(RulesetError) as info:
        load_ruleset(path)
    missing = {p.field for p in info.value.problems}
    assert {"title", "family", "version", "nodes", "components", "states", "tests"} <= missing
    assert "(and " in str(info.value)
