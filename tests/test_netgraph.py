"""`ohmtrail graph`: the circuit as modelled, drawn with Graphviz (or its DOT source without it)."""

from __future__ import annotations

import re
import shutil
from pathlib import Path

import pytest

from assistant.cli import main
from assistant.errors import OhmtrailError
from assistant.netgraph import circuit_graph, render_graph, si, wire_ohms
from assistant.ruleset import load_ruleset

STOP_LAMPS = "rulesets/lamp/stop_lamps.yaml"


@pytest.fixture(scope="module")
def ruleset():  # type: ignore[no-untyped-def]
    return load_ruleset(STOP_LAMPS, beside=False).ruleset


def _edge(source: str, a: str, b: str) -> str:
    """The DOT statement of the edge between two test points."""
    match = re.search(rf"^\s*node_{a} -- node_{b} \[.*?\]$", source, re.MULTILINE | re.DOTALL)
    assert match, f"no edge {a} -- {b}"
    return source[match.start():source.index("]", match.start()) + 1]


def test_wire_resistance_from_the_copper_standard() -> None:
    # International Annealed Copper Standard: 0.017241 ohm·mm²/m at 20 °C, 0.00393 /K.
    # 1.8 m of 1.0 mm²: 0.017241 * 1.8 / 1.0 = 0.031034 ohm
    assert wire_ohms(1.8, 1.0e-6) == pytest.approx(0.0310338, rel=1e-5)
    # at 60 °C: × (1 + 0.00393 * 40) = × 1.1572
    assert wire_ohms(1.8, 1.0e-6, 60.0) == pytest.approx(0.0310338 * 1.1572, rel=1e-5)


@pytest.mark.parametrize("value, unit, text", [
    (0.0310338, "ohm", "31.03 mΩ"),
    (6.857, "ohm", "6.857 Ω"),
    (100e3, "ohm", "100 kΩ"),
    (0.015, "A", "15 mA"),
    (12.65, "V", "12.65 V"),
    (0.0, "V", "0 V"),
])
def test_si_prefixes(value: float, unit: str, text: str) -> None:
    assert si(value, unit) == text


def test_nodes_components_values_and_tests_are_drawn(ruleset) -> None:  # type: ignore[no-untyped-def]
    source = circuit_graph(ruleset).source
    for node in ruleset.nodes:
        assert f"node_{node} [" in source
    # two-terminal parts are the lines between their nodes, with their values
    feed = _edge(source, "F12_OUT", "SW_IN")
    assert "w_feed (wire)" in feed and "1.8 m × 1 mm², ≈ 31.03 mΩ" in feed
    # P21W hot resistance R = V²/P = 144 / 21 = 6.857 ohm (UN ECE R37 rating, FACTS.md [D])
    assert "21 W P21W at 12 V, hot 6.857 Ω" in _edge(source, "L_FEED", "L_GND")
    assert "10 A fuse" in _edge(source, "BATT_POS", "F12_OUT")
    assert "closed in: pedal_pressed" in _edge(source, "SW_IN", "SW_OUT")
    # the battery is a box with its terminals named
    assert "comp_battery [label=\"battery (battery)" in source and "EMF 12.45 V to 12.65 V, internal 10 mΩ" in source
    # each test point lists the tests that probe it
    assert re.search(r"node_L_FEED \[label=\"L_FEED\n[^\"]*tests: v_left_feed, r_left_lamp, i_left", source)


def test_a_state_draws_its_open_contacts_dashed(ruleset) -> None:  # type: ignore[no-untyped-def]
    released = _edge(circuit_graph(ruleset, "released").source, "SW_IN", "SW_OUT")
    pressed = _edge(circuit_graph(ruleset, "pedal_pressed").source, "SW_IN", "SW_OUT")
    assert "style=dashed" in released and "OPEN now" in released
    assert "style=dashed" not in pressed and "CLOSED now" in pressed
    assert "style=dashed" not in _edge(circuit_graph(ruleset, "released").source, "F12_OUT", "SW_IN")
    with pytest.raises(OhmtrailError, match="unknown state 'cranking'"):
        circuit_graph(ruleset, "cranking")


@pytest.mark.skipif(shutil.which("dot") is None, reason="Graphviz 'dot' is not installed")
def test_renders_svg_png_pdf(ruleset, tmp_path: Path) -> None:  # type: ignore[no-untyped-def]
    graph = circuit_graph(ruleset)
    svg = render_graph(graph, "svg", tmp_path / "c.svg")
    assert svg.hint is None and b"<svg" in svg.path.read_bytes()
    assert render_graph(graph, "png", tmp_path / "c.png").path.read_bytes()[:8] == b"\x89PNG\r\n\x1a\n"
    assert render_graph(graph, "pdf", tmp_path / "c.pdf").path.read_bytes()[:5] == b"%PDF-"


def test_without_dot_the_source_is_written_with_a_hint(ruleset, tmp_path: Path,  # type: ignore[no-untyped-def]
                                                       monkeypatch: pytest.MonkeyPatch,
                                                       capsys: pytest.CaptureFixture[str]) -> None:
    monkeypatch.setenv("PATH", str(tmp_path / "empty"))
    assert main(["graph", STOP_LAMPS, "--format", "png", "-o", str(tmp_path / "c.png")]) == 0
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "Graphviz 'dot' not found" in err and "dot -Tpng" in err
    assert not (tmp_path / "c.png").exists()
    assert (tmp_path / "c.dot").read_text(encoding="utf-8").startswith("graph stop_lamps {")


def test_cli_default_name_and_bad_state(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                        capsys: pytest.CaptureFixture[str]) -> None:
    target = Path(STOP_LAMPS).resolve()
    monkeypatch.chdir(tmp_path)
    assert main(["graph", str(target), "--format", "dot", "--state", "released"]) == 0
    assert Path("stop_lamps-released.dot").is_file()
    assert main(["graph", str(target), "--state", "nope"]) == 1
    assert "unknown state 'nope'" in capsys.readouterr().err
