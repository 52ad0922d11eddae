"""Node voltages of every fault of every bundled ruleset, in every state, against ngspice.

Reference tool: ngspice (Debian package ``ngspice``), ``.op`` in batch mode on the deck that
``ohmtrail spice`` writes (assistant/spice.py), read back from an ASCII raw file (16 digits).
Tolerance: 1e-6 relative or 1 µV, whichever is larger. Every ruleset under rulesets/ is
found afresh, so rulesets added later are checked too.
"""

from __future__ import annotations

import os
import shutil
import subprocess
from pathlib import Path

import pytest

from assistant.predict import hypotheses_of
from assistant.ruleset.load import load_ruleset, ruleset_files
from assistant.spice import spice_deck

ROOT = Path(__file__).resolve().parents[2]
RULESETS = sorted(ruleset_files([ROOT / "rulesets"]))
REL, ABS_VOLTS = 1e-6, 1e-6


def _ngspice() -> str:
    found = shutil.which("ngspice")
    if found is None:
        message = ("ngspice is not installed: the circuit engine's reference check needs it "
                   "(apt-get install ngspice, or `make tools`)")
        if os.environ.get("CI") == "true":
            pytest.fail(message)
        pytest.skip(message)
    return found


def read_raw(path: Path) -> dict[str, float]:
    """Operating-point values of an ASCII ngspice raw file, by lower-case variable name."""
    lines = path.read_text().splitlines()
    names: list[str] = []
    values: list[float] = []
    mode = None
    for line in lines:
        if line.startswith("Variables:"):
            mode = "vars"
            continue
        if line.startswith("Values:"):
            mode = "values"
            continue
        if mode == "vars" and line.startswith("\t"):
            names.append(line.split()[1].lower())
        elif mode == "values" and line.strip():
            values.append(float(line.split()[-1]))
    assert len(names) == len(values) and names, f"unreadable raw file {path}"
    return dict(zip(names, values, strict=True))


def run_ngspice(deck_text: str, folder: Path) -> dict[str, float]:
    deck = folder / "deck.cir"
    raw = folder / "deck.raw"
    deck.write_text(deck_text)
    env = dict(os.environ, SPICE_ASCIIRAWFILE="1")
    proc = subprocess.run([_ngspice(), "-b", "-r", str(raw), str(deck)], capture_output=True, text=True,
                          env=env, timeout=120, check=False)
    assert proc.returncode == 0 and raw.is_file(), f"ngspice failed:\n{proc.stdout[-2000:]}\n{proc.stderr[-2000:]}"
    return read_raw(raw)


def test_rulesets_are_found() -> None:
    # the bundled stop-lamp ruleset at least; others are picked up as they are added
    assert any(p.name == "stop_lamps.yaml" for p in RULESETS)


@pytest.mark.parametrize("path", RULESETS, ids=[p.stem for p in RULESETS])
def test_every_fault_in_every_state_matches_ngspice(path: Path, tmp_path: Path) -> None:
    _ngspice()
    ruleset = load_ruleset(path).ruleset
    hyps, _ = hypotheses_of(ruleset)
    ids = tuple(h.id for h in hyps)
    compared = 0
    for state in ruleset.states:
        deck = spice_deck(ruleset, ids, state)
        folder = tmp_path / state
        folder.mkdir()
        spice = run_ngspice(deck.text, folder)
        for (hyp, node), ours in deck.volts.items():
            name = deck.spice_nodes[(hyp, node)]
            if name == "0":
                continue
            theirs = spice[f"v({name})"]
            assert abs(ours - theirs) <= max(REL * abs(theirs), ABS_VOLTS), (
                f"{path.name} state {state} hypothesis {hyp} node {node}: engine {ours!r} V, ngspice {theirs!r} V")
            compared += 1
    # every hypothesis in every state contributed its nodes
    assert compared >= len(ids) * len(ruleset.states) * (len(ruleset.nodes) - 1)
