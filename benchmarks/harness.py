"""Synthetic harnesses of a chosen size for the benchmarks (demo data of our own invention).

A battery feeds a fuse box; each fused branch runs wire, connector, wire to a lamp, then a
ground wire to a shared ground eyelet. Five nodes a branch; tests: the feed voltage and the
ground-side drop of the lamps of ten branches spread over the harness, one resistance and one
current test (a ruleset has a few dozen tests, whatever the size of the harness).
"""

from __future__ import annotations

from typing import Any

from assistant.ruleset.load import LoadedRuleset, Locator
from assistant.ruleset.model import Ruleset

NODES_PER_BRANCH = 5
TESTED_BRANCHES = 10  # a ruleset tests a few branches, whatever the harness size


def harness(nodes: int) -> LoadedRuleset:
    """A harness of about ``nodes`` nodes, ready for predict()."""
    branches = max(1, (nodes - 3) // NODES_PER_BRANCH)
    comps: list[dict[str, Any]] = [
        {"id": "battery", "type": "battery", "nodes": ["BATT", "GND"], "emf": "12.6 V"},
        {"id": "main", "type": "fuse", "nodes": ["BATT", "BUS"], "rating": "60 A"},
        {"id": "g_body", "type": "ground", "nodes": ["G", "GND"]},
    ]
    tests: list[dict[str, Any]] = []
    for k in range(branches):
        f, a, c, lamp, lg = (f"F{k}", f"A{k}", f"C{k}", f"L{k}", f"LG{k}")
        comps += [
            {"id": f"fuse{k}", "type": "fuse", "nodes": ["BUS", f], "rating": "5 A"},
            {"id": f"w{k}a", "type": "wire", "nodes": [f, a], "length": "1.5 m", "section": "0.75 mm2"},
            {"id": f"c{k}", "type": "connector", "nodes": [a, c]},
            {"id": f"w{k}b", "type": "wire", "nodes": [c, lamp], "length": "1 m", "section": "0.75 mm2"},
            {"id": f"lamp{k}", "type": "lamp", "nodes": [lamp, lg], "rating": "10 W"},
            {"id": f"w{k}g", "type": "wire", "nodes": [lg, "G"], "length": "1 m", "section": "0.75 mm2"},
        ]
        if k % max(1, branches // TESTED_BRANCHES) == 0 and len(tests) < 2 * TESTED_BRANCHES:
            tests += [
                {"id": f"v_lamp{k}", "kind": "voltage", "at": lamp},
                {"id": f"drop_gnd{k}", "kind": "drop", "between": [lg, "GND"]},
            ]
    tests += [
        {"id": "r_lamp0", "kind": "resistance", "between": ["L0", "LG0"], "only": ["lamp0"]},
        {"id": "i_lamp0", "kind": "current", "component": "lamp0"},
    ]
    node_names = ["GND", "BATT", "BUS", "G"] + [n for c in comps for n in c["nodes"]]
    doc = {
        "format": 1, "id": f"harness_{nodes}", "title": f"synthetic harness, {nodes} nodes", "family": "lamp",
        "version": "1", "system_voltage": "12 V", "nodes": {n: {} for n in dict.fromkeys(node_names)},
        "components": comps, "states": {"on": {"label": "lamps on"}}, "tests": tests,
    }
    ruleset = Ruleset.model_validate(doc)
    return LoadedRuleset(ruleset, f"<harness {nodes}>", f"{nodes:064d}", Locator("<harness>", None))
