"""The complete example in docs/ruleset-format.md lints clean, so the page cannot drift from the code."""

from __future__ import annotations

import re
from pathlib import Path

from assistant.ruleset import fault_list, lint_ruleset, load_ruleset

DOC = Path(__file__).resolve().parents[2] / "docs" / "ruleset-format.md"
MARKER = "<!-- example: lints clean -->"


def _example() -> str:
    text = DOC.read_text(encoding="utf-8")
    assert text.count(MARKER) == 1, "the doc must mark exactly one complete example"
    after = text.split(MARKER, 1)[1]
    match = re.match(r"\s*```yaml\n(.*?)\n```", after, re.DOTALL)
    assert match, "the marker must be followed by a ```yaml block"
    return match.group(1) + "\n"


def test_the_documented_example_lints_clean(tmp_path: Path) -> None:
    path = tmp_path / "example.yaml"
    path.write_text(_example(), encoding="utf-8")
    loaded = load_ruleset(path)
    assert [str(p) for p in lint_ruleset(loaded)] == []
    ids = {f.id for f in fault_list(loaded.ruleset)}
    # the weight shorthand and weight 0 behave as the page says
    assert "lamp.high_resistance" not in ids and "w_gnd.short_to_ground" not in ids
    assert "lamp.filament_open" in ids and "w_gnd.short_to_power" in ids
    assert loaded.ruleset.cases[0].expect in ids


def test_every_component_type_and_test_kind_is_documented() -> None:
    from assistant.ruleset.model import COMPONENT_TYPES, Ruleset

    text = DOC.read_text(encoding="utf-8")
    for name in COMPONENT_TYPES:
        assert f"| `{name}` |" in text, f"component type {name} missing from the doc"
    kinds = ("voltage", "drop", "resistance", "current", "fuse_drop", "observation")
    for kind in kinds:
        assert f"| `{kind}` |" in text, f"test kind {kind} missing from the doc"
    for name in Ruleset.model_fields:
        assert f"| `{name}` |" in text, f"top-level field {name} missing from the doc"


def test_default_fault_table_matches_defaults_py() -> None:
    """Each type's row in the default-modes table names every default mode with its weight."""
    from assistant.ruleset.defaults import DEFAULT_MODES

    text = DOC.read_text(encoding="utf-8")
    section = text.split("### Default fault modes", 1)[1].split("## Fault specs", 1)[0]
    rows = {m.group(1): m.group(2) for m in re.finditer(r"^\| `(\w+)` \| (.*) \|$", section, re.MULTILINE)}
    assert set(rows) == set(DEFAULT_MODES)
    for type_name, modes in DEFAULT_MODES.items():
        for mode, default in modes.items():
            assert re.search(rf"`{mode}`†? {default.weight:g}\b", rows[type_name]), (type_name, mode)
            if default.range_ohms is not None:
                low, high = default.range_ohms
                assert f"{low:g}–{high:g}" in rows[type_name], (type_name, mode)
