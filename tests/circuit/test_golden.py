"""Golden circuits: the engine against stored ngspice results, with no simulator needed.

Each folder under tests/data/circuits/ holds a ruleset, the decks ``ohmtrail spice`` wrote for
it and ngspice's ``.op`` node voltages on those decks (reference tool: ngspice-39, batch mode;
see the "source" key of each ngspice_op.json). Tolerance: 1e-6 relative or 1 µV.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from assistant.ruleset.load import load_ruleset

from conftest import nominal_volts

FOLDERS = sorted(p for p in (Path(__file__).resolve().parents[1] / "data" / "circuits").iterdir() if p.is_dir())


@pytest.mark.parametrize("folder", FOLDERS, ids=[p.name for p in FOLDERS])
def test_engine_matches_the_stored_ngspice_operating_points(folder: Path) -> None:
    reference = json.loads((folder / "ngspice_op.json").read_text())
    assert reference["source"].startswith("ngspice")
    ruleset = load_ruleset(folder / "ruleset.yaml").ruleset
    checked = 0
    for state, by_hypothesis in reference["states"].items():
        assert (folder / f"deck_{state}.cir").is_file()
        for hypothesis, volts in by_hypothesis.items():
            ours = nominal_volts(ruleset, hypothesis, state)
            for node, theirs in volts.items():
                assert abs(ours[node] - theirs) <= max(1e-6 * abs(theirs), 1e-6), (state, hypothesis, node)
                checked += 1
    assert checked >= 2 * 7 * 10  # two states, seven hypotheses, ten nodes
