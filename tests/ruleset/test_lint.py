"""Semantic checks: each kind of problem is found and located at the offending value."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import pytest

from assistant.ruleset import lint_paths, load_ruleset
from assistant.ruleset.lint import lint_ruleset, summary
from tests.conftest import RULESETS, STOP_LAMPS


def _position(text: str, mark: str, nth: int = 1) -> tuple[int, int]:
    offset = -1
    for _ in range(nth):
        offset = text.index(mark, offset + 1)
    line = text.count("\n", 0, offset) + 1
    col = offset - (text.rfind("\n", 0, offset) + 1) + 1
    return line, col


def test_bundled_rulesets_lint_clean() -> None:
    result = lint_paths([RULESETS])
    assert result.files >= 1
    assert result.problems == (), "\n".join(str(p) for p in result.problems)
    assert summary(result).startswith("ok: ")


@pytest.mark.parametrize(
    ("old", "new", "mark", "nth", "fragment"),
    [
        # a test on a missing node
        ("    at: SPLICE\n", "    at: SPLICE_X\n", "SPLICE_X", 1, "unknown node 'SPLICE_X'"),
        # a component joined to an unknown node
        ("    nodes: [SPLICE, R_FEED]", "    nodes: [SPLICE, R_FEEDX]", "R_FEEDX", 1, "unknown node 'R_FEEDX'"),
        # duplicate component ids: the second one is named
        ("  - id: w_right\n", "  - id: w_left\n", "w_left\n    type: wire", 2, "duplicate id 'w_left' in components"),
        # a state that closes something that is not a contact
        ("    closes: [pedal_switch]", "    closes: [lamp_left]", "lamp_left]", 1, "a lamp, not a switch"),
        # a state that names an unknown contact
        ("    closes: [pedal_switch]", "    closes: [pedal_swich]", "pedal_swich", 1, "unknown contact"),
        # a rule that names an unknown test
        ("      - require_first: look_fuse", "      - require_first: look_fuses", "look_fuses", 1,
         "unknown test 'look_fuses'"),
        # a rule that names an unknown fault
        ("      - scale: [g_rear.high_resistance, 2.0]", "      - scale: [g_rear.melted, 2.0]", "[g_rear.melted", 1,
         "unknown fault 'g_rear.melted'"),
        # a rule fact on an unknown test reading
        ("      - {fact: reading.look_fuse,", "      - {fact: reading.look_fuze,", "reading.look_fuze", 1,
         "unknown test 'look_fuze'"),
        # a case expecting an unknown fault
        ("    expect: f12.blown", "    expect: f13.blown", "f13.blown", 1, "unknown fault 'f13.blown'"),
        # a mode the component type cannot have
        ("      high_resistance: 2.5 ", "      seized: 2.5 ", "seized", 1, "a ground cannot have fault mode 'seized'"),
        # a test needing an unknown state
        ("    state: released\n", "    state: relaxed\n", "relaxed", 1, "unknown state 'relaxed'"),
    ],
)
def test_semantic_problems_are_located(
    write_copy: Callable[..., Path], old: str, new: str, mark: str, nth: int, fragment: str
) -> None:
    path = write_copy(old, new)
    problems = lint_ruleset(load_ruleset(path))
    matching = [p for p in problems if fragment in p.message]
    assert matching, [str(p) for p in problems]
    line, col = _position(path.read_text(encoding="utf-8"), mark, nth)
    assert (matching[0].file, matching[0].line, matching[0].column) == (str(path), line, col)
    assert str(matching[0]).startswith(f"{path}:{line}:{col}: ")


def test_component_with_no_path_to_ground(write_copy: Callable[..., Path]) -> None:
    # the centre lamp's ground wire now ends at a node nothing else joins
    path = write_copy(
        "    nodes: [H_GND, G_REAR]",
        "    nodes: [H_GND, H_LOOSE]",
        text=STOP_LAMPS.read_text(encoding="utf-8").replace("  G_REAR:\n", "  H_LOOSE:\n  G_REAR:\n", 1),
    )
    problems = lint_ruleset(load_ruleset(path))
    names = {p.message.split("'")[1] for p in problems if "no path to ground" in p.message}
    assert {"w_high", "lamp_high", "w_high_gnd"} <= names


def test_lint_reports_every_file(tmp_path: Path, write_copy: Callable[..., Path]) -> None:
    write_copy("    at: SPLICE\n", "    at: NOWHERE\n", name="a.yaml")
    (tmp_path / "b.yaml").write_text("id: [\n", encoding="utf-8")
    result = lint_paths([tmp_path])
    assert result.files == 2
    assert {Path(p.file).name for p in result.problems if p.file} == {"a.yaml", "b.yaml"}
    assert summary(result) == "2 problems in 2 rulesets"
