"""Fault injection: every mode of the format on a circuit holding every component type."""

from __future__ import annotations

import numpy as np
import pytest

from assistant.circuit.faults import GENERIC_MODES, Sampler, stream
from assistant.circuit.netlist import CircuitModel
from assistant.circuit.operating import operate_states
from assistant.predict import hypotheses_of
from assistant.ruleset.defaults import DEFAULT_MODES, fault_list

from conftest import build_ruleset

GENERIC = {m: 1.0 for m in GENERIC_MODES}

ZOO = [
    {"id": "b", "type": "battery", "nodes": ["P", "GND"], "emf": 12.6},
    {"id": "f", "type": "fuse", "nodes": ["P", "F"], "rating": 20},
    {"id": "w", "type": "wire", "nodes": ["F", "S1"], "length": "1 m", "section": "1 mm2"},
    {"id": "sw", "type": "switch", "nodes": ["S1", "S2"]},
    {"id": "c", "type": "connector", "nodes": ["S2", "L"]},
    {"id": "lamp", "type": "lamp", "nodes": ["L", "LG"], "rating": 21},
    {"id": "g", "type": "ground", "nodes": ["LG", "GND"]},
    {"id": "coil", "type": "relay_coil", "nodes": ["S2", "GND"], "resistance": 80},
    {"id": "k", "type": "relay_contact", "nodes": ["F", "M"], "coil": "coil"},
    {"id": "m", "type": "motor", "nodes": ["M", "GND"], "resistance": 0.5, "running_current": 5},
    {"id": "ecu", "type": "module_supply", "nodes": ["REF", "GND"], "voltage": 5, "internal_resistance": 1},
    {"id": "tps", "type": "sensor", "kind": "ratiometric", "nodes": ["REF", "SIG", "GND"], "ratio": 0.3},
    {"id": "pull", "type": "resistor", "nodes": ["SIG", "GND"], "resistance": "100 kohm"},
    {"id": "rp", "type": "resistor", "nodes": ["REF", "T"], "resistance": "2.2 kohm"},
    {"id": "cts", "type": "sensor", "kind": "resistive", "nodes": ["T", "GND"], "resistance": "2.5 kohm"},
    {"id": "sleep", "type": "load", "nodes": ["F", "GND"], "current": "30 mA"},
]
STATES = {"key_off": {"label": "key off"}, "run": {"label": "running", "closes": ["sw"]}}


def zoo():  # type: ignore[no-untyped-def]
    comps = [dict(c, faults=dict(GENERIC)) for c in ZOO]
    return build_ruleset(comps, states=STATES)


def test_the_zoo_holds_every_type_and_every_default_mode() -> None:
    ruleset = zoo()
    modes = {(f.component_type, f.mode) for f in fault_list(ruleset)}
    for ctype, defaults in DEFAULT_MODES.items():
        for mode in list(defaults) + sorted(GENERIC_MODES):
            assert (ctype, mode) in modes


def test_every_fault_mode_changes_the_circuit() -> None:
    ruleset = zoo()
    model = CircuitModel(ruleset)
    _, members = hypotheses_of(ruleset)
    points = operate_states(model, model.batch(members, 1, nominal=True), {})
    quiet = []
    for h, (hyp, _) in enumerate(members[1:], start=1):
        moved = any(np.abs(p.solution.volts[h] - p.solution.volts[0]).max() > 1e-9 for p in points.values())
        if not moved:
            quiet.append(hyp)
    assert quiet == []


def test_shorts_default_to_the_last_node_and_not_across_the_battery() -> None:
    ruleset = zoo()
    model = CircuitModel(ruleset)
    faults = {f.id: f for f in fault_list(ruleset)}
    batch = model.batch([("w.short_to_ground", (faults["w.short_to_ground"],)),
                         ("lamp.short_to_power", (faults["lamp.short_to_power"],)),
                         ("g.short_to_ground", (faults["g.short_to_ground"],))], 4)
    where = {s.owner: (s.a, s.b) for s in batch.shorts}
    assert where["w.short_to_ground"] == ("S1", "GND")
    assert where["lamp.short_to_power"] == ("LG", "P")  # the last node, as the format says
    assert where["g.short_to_ground"] == ("LG", "GND")


@pytest.mark.parametrize("low,high", [(0.5, 50.0), (0.01, 0.5)])
def test_log_uniform_magnitudes_stay_in_range_and_centre_on_the_geometric_mean(low: float, high: float) -> None:
    draws = Sampler(stream(3, "x"), 4000).log_uniform(low, high)
    assert draws.min() >= low and draws.max() <= high
    # log-uniform: the median is the geometric mean (within sampling error of 4000 draws)
    assert np.log(np.median(draws)) == pytest.approx(np.log(np.sqrt(low * high)), abs=0.1 * np.log(high / low))
    nominal = Sampler(stream(3, "x"), 5, nominal=True).log_uniform(low, high)
    assert nominal == pytest.approx(np.full(5, np.sqrt(low * high)))


def test_author_range_is_used() -> None:
    comps = [dict(c) for c in ZOO]
    comps[6] = dict(comps[6], faults={"high_resistance": {"weight": 1, "range": ["2 ohm", "3 ohm"]}})
    ruleset = build_ruleset(comps, states=STATES)
    model = CircuitModel(ruleset)
    fault = next(f for f in fault_list(ruleset) if f.id == "g.high_resistance")
    batch = model.batch([("g.high_resistance", (fault,))], 200)
    series = batch.values["g"]["series"]
    assert series.min() >= 2.0 and series.max() <= 3.0


def test_draws_are_deterministic_and_each_hypothesis_has_its_own_stream() -> None:
    ruleset = zoo()
    model = CircuitModel(ruleset)
    faults = {f.id: f for f in fault_list(ruleset)}
    one = model.batch([("g.high_resistance", (faults["g.high_resistance"],))], 16, seed=7)
    two = model.batch([("w.high_resistance", (faults["w.high_resistance"],)),
                       ("g.high_resistance", (faults["g.high_resistance"],))], 16, seed=7)
    again = model.batch([("g.high_resistance", (faults["g.high_resistance"],))], 16, seed=7)
    other_seed = model.batch([("g.high_resistance", (faults["g.high_resistance"],))], 16, seed=8)
    assert np.array_equal(one.values["g"]["series"], again.values["g"]["series"])
    # adding another hypothesis before it leaves its draws unchanged
    assert np.array_equal(one.values["g"]["series"], two.values["g"]["series"][16:])
    assert not np.array_equal(one.values["g"]["series"], other_seed.values["g"]["series"])
