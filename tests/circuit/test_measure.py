"""Each measurement kind through the meter model: loading, floating nodes, ohms, jacks, fuse drops."""

from __future__ import annotations

from types import SimpleNamespace
from typing import Any

import numpy as np
import pytest

from assistant.circuit.measure import measurement_for
from assistant.circuit.netlist import CircuitModel
from assistant.errors import CircuitError
from assistant.meter import default_meter
from assistant.predict import PredictionTable, compute_table

from conftest import build_ruleset, loaded_of, nominal_volts

LAMP = [
    {"id": "b", "type": "battery", "nodes": ["P", "GND"], "emf": "12.6 V"},
    {"id": "f", "type": "fuse", "nodes": ["P", "F"], "rating": "10 A"},
    {"id": "sw", "type": "switch", "nodes": ["F", "S"]},
    {"id": "w", "type": "wire", "nodes": ["S", "A"], "length": "2 m", "section": "1 mm2"},
    {"id": "lamp", "type": "lamp", "nodes": ["A", "B"], "rating": "21 W",
     "faults": {"high_resistance": 1}},
    {"id": "wg", "type": "wire", "nodes": ["B", "G"], "length": "1 m", "section": "1 mm2"},
    {"id": "g", "type": "ground", "nodes": ["G", "GND"]},
    {"id": "stub", "type": "wire", "nodes": ["F", "X"], "length": "0.3 m", "section": "0.5 mm2"},
    {"id": "sleep", "type": "load", "nodes": ["F", "GND"], "current": "30 mA"},
]
STATES = {"off": {"label": "switch off"}, "on": {"label": "switch on", "closes": ["sw"]}}


def table(tests: list[dict[str, Any]], components: list[dict[str, Any]] | None = None, *, nominal: bool = True,
          pairs: tuple[tuple[str, str], ...] = (), samples: int = 1) -> PredictionTable:
    ruleset = build_ruleset(components or LAMP, tests, states=STATES)
    return compute_table(loaded_of(ruleset), default_meter(), samples=samples, pairs=pairs, nominal=nominal)


def shown(tab: PredictionTable, hyp: str, test: str) -> float:
    return float(tab.samples[tab.hypothesis_index(hyp), tab.test_index(test), 0])


def test_floating_node_reads_what_a_10_megohm_input_reads() -> None:
    # the stub wire open leaves X touching nothing: a 10 MOhm input closes no loop and reads 0 V
    tab = table([{"id": "v_x", "kind": "voltage", "at": "X", "state": "on"}])
    assert shown(tab, "none", "v_x") == pytest.approx(12.6, abs=0.05)
    assert shown(tab, "stub.open", "v_x") == 0.0


def test_drop_inside_a_floating_island_is_the_difference_inside_it() -> None:
    # feed and ground wire both open: the lamp floats with no source in its island; across it 0 V
    tab = table([{"id": "drop_lamp", "kind": "drop", "between": ["A", "B"], "state": "on"},
                 {"id": "v_a", "kind": "voltage", "at": "A", "state": "on"}], pairs=(("w.open", "wg.open"),))
    assert shown(tab, "none", "drop_lamp") > 11.5
    assert shown(tab, "w.open+wg.open", "drop_lamp") == 0.0
    assert shown(tab, "w.open+wg.open", "v_a") == 0.0
    # the ground side open alone: the lamp's ground terminal sits at the feed voltage
    assert shown(tab, "wg.open", "v_a") == pytest.approx(shown(tab, "none", "v_a") + 0.0, abs=0.5)


def test_voltmeter_loading_on_a_high_impedance_divider() -> None:
    # Floyd, Electric Circuit Fundamentals, loading effect of a voltmeter (method from memory):
    # 5 V over 1 M + 1 M reads 2.5 V unloaded; Thevenin 0.5 M, so a 10 M input reads
    # 2.5 * 10 / 10.5 = 2.381 V [D], shown as 2.38 on the 20 V range
    comps = [{"id": "ecu", "type": "module_supply", "nodes": ["REF", "GND"], "voltage": "5 V",
              "internal_resistance": "1e-6 ohm", "tolerance": 0},
             {"id": "r1", "type": "resistor", "nodes": ["REF", "T"], "resistance": "1 Mohm", "tolerance": 0},
             {"id": "r2", "type": "resistor", "nodes": ["T", "GND"], "resistance": "1 Mohm", "tolerance": 0}]
    tab = table([{"id": "v_t", "kind": "voltage", "at": "T", "state": "on"}], comps)
    assert shown(tab, "none", "v_t") == pytest.approx(2.38, abs=1e-9)


def test_scan_tool_reads_the_divider_unloaded_and_clips_at_its_span() -> None:
    # The same divider read by the module itself (its input is in the circuit already): the
    # unloaded 2.5 V of the 1 M + 1 M divider, two decimals, uncertainty (1 % of 2.50 + 2 x 0.01)
    # / sqrt(3) = 0.0260 V (assistant/meter.py, from memory); the 12.6 V battery above its 5 V span
    # shows 5.00 V. The meter on the same point reads the loaded 2.38 V.
    comps = [{"id": "ecu", "type": "module_supply", "nodes": ["REF", "GND"], "voltage": "5 V",
              "internal_resistance": "1e-6 ohm", "tolerance": 0},
             {"id": "r1", "type": "resistor", "nodes": ["REF", "T"], "resistance": "1 Mohm", "tolerance": 0},
             {"id": "r2", "type": "resistor", "nodes": ["T", "GND"], "resistance": "1 Mohm", "tolerance": 0},
             {"id": "b", "type": "battery", "nodes": ["P", "GND"], "emf": "12.6 V", "tolerance": 0},
             {"id": "load", "type": "resistor", "nodes": ["P", "GND"], "resistance": "100 ohm", "tolerance": 0}]
    tab = table([{"id": "live_t", "kind": "voltage", "at": "T", "state": "on", "instrument": "scan_tool"},
                 {"id": "v_t", "kind": "voltage", "at": "T", "state": "on"},
                 {"id": "live_p", "kind": "voltage", "at": "P", "state": "on", "instrument": "scan_tool"}], comps)
    t = tab.test_index("live_t")
    assert shown(tab, "none", "live_t") == pytest.approx(2.50, abs=1e-9)
    assert float(tab.resolution[0, t, 0]) == pytest.approx(0.01)
    assert float(tab.sigma[0, t, 0]) == pytest.approx((0.01 * 2.5 + 2 * 0.01) / np.sqrt(3), rel=1e-9)
    assert shown(tab, "none", "v_t") == pytest.approx(2.38, abs=1e-9)
    assert shown(tab, "none", "live_p") == pytest.approx(5.00, abs=1e-9)
    assert tab.tests[t].instrument == "scan_tool" and tab.tests[tab.test_index("v_t")].instrument == "meter"


def test_resistance_of_a_lamp_on_the_bench_excludes_its_holder() -> None:
    # cold P21W: 6.857 / 12 = 0.571 ohm, plus 0.2 ohm of leads = 0.771, shown 0.8 on the 200 ohm
    # range (0.1 ohm steps) [D]; the holder's high resistance is not on the bench
    tab = table([{"id": "r_lamp", "kind": "resistance", "between": ["A", "B"], "only": ["lamp"]}])
    assert shown(tab, "none", "r_lamp") == pytest.approx(0.8, abs=1e-9)
    assert shown(tab, "lamp.high_resistance", "r_lamp") == pytest.approx(0.8, abs=1e-9)
    assert shown(tab, "lamp.filament_open", "r_lamp") == np.inf


def test_resistance_in_circuit_de_energised_with_isolation() -> None:
    # ground side of the lamp to ground, in place: 1 m of 1 mm2 (17.2 mOhm) + the 2 mOhm eyelet
    # + 0.2 ohm of leads = 0.22 ohm, shown 0.2 [D]; a corroded eyelet adds its ohms; pulling the
    # ground point (isolate) leaves no path: OL
    tests = [{"id": "r_gnd", "kind": "resistance", "between": ["B", "GND"]},
             {"id": "r_gnd_pulled", "kind": "resistance", "between": ["B", "GND"], "isolate": ["g"]}]
    tab = table(tests)
    assert shown(tab, "none", "r_gnd") == pytest.approx(0.2, abs=1e-9)
    assert shown(tab, "g.high_resistance", "r_gnd") == pytest.approx(0.2 + 5.0, abs=0.1)  # nominal: sqrt(0.5 x 50) = 5 ohm
    # with the eyelet out, the lamp's ground side could reach ground only back through the lamp
    # and its feed, and the switch is open in the first state: no path, OL
    assert shown(tab, "none", "r_gnd_pulled") == np.inf


def test_current_on_the_10a_jack_includes_its_burden() -> None:
    # P21W on 12.6 V through the fused 10 A jack (0.03 ohm burden): a little under 12.6 / 6.86
    tab = table([{"id": "i_lamp", "kind": "current", "component": "lamp", "state": "on"},
                 {"id": "i_lamp_clamp", "kind": "current", "component": "lamp", "state": "on", "jack": "clamp"}])
    jack, clamp = shown(tab, "none", "i_lamp"), shown(tab, "none", "i_lamp_clamp")
    assert 1.7 < jack < 1.85
    assert jack < clamp  # the clamp adds no burden
    assert shown(tab, "lamp.filament_open", "i_lamp") == 0.0


def test_small_current_goes_to_the_ma_jack_and_reads_its_burden() -> None:
    # the sleeping module draws 30 mA at 12 V (R = 400 ohm): on the 200 mA range (1 ohm burden)
    # 12.6 / 401 A = 31.4 mA [D]
    tab = table([{"id": "i_sleep", "kind": "current", "component": "sleep", "state": "off"}])
    assert tab.tests[0].jack == "auto"
    assert shown(tab, "none", "i_sleep") == pytest.approx(0.0314, abs=1e-4)
    assert tab.resolution[0, 0, 0] == pytest.approx(1e-4)  # 0.1 mA steps of the 200 mA range


def test_a_short_past_the_jack_rating_reads_ol_or_blows_the_fuse() -> None:
    tab = table([{"id": "i_lamp", "kind": "current", "component": "lamp", "state": "on"},
                 {"id": "v_f", "kind": "voltage", "at": "F", "state": "off"}],
                [dict(c, faults={"short_to_ground": 1}) if c["id"] == "w" else c for c in LAMP])
    # the chafed feed blows the 10 A fuse (13.5 A), which stays blown with the switch off too
    assert shown(tab, "w.short_to_ground", "i_lamp") == 0.0
    assert shown(tab, "w.short_to_ground", "v_f") == 0.0
    assert shown(tab, "none", "v_f") > 12.0


def test_fuse_drop_reads_millivolts_of_the_current_through_it() -> None:
    # 10 A blade fuse: 80 mV at rating -> 8 mOhm; the sleep load (400 ohm) draws 12.6 / 400 =
    # 31.5 mA, dropping 0.252 mV, shown 0.3 mV on the 200 mV range [D]; blown, the gap shows
    # the battery through the load
    tab = table([{"id": "fd", "kind": "fuse_drop", "fuse": "f", "state": "off"}])
    assert shown(tab, "none", "fd") == pytest.approx(0.0003, abs=1e-12)
    assert shown(tab, "f.blown", "fd") == pytest.approx(12.6, abs=0.05)


def test_observation_rows_by_fault_then_component_then_default() -> None:
    tests = [{"id": "look", "kind": "observation", "question": "Fuse blown?",
              "likelihoods": {"f.blown": {"yes": 0.9, "no": 0.1}, "lamp": {"yes": 0.3, "no": 0.7},
                              "default": {"yes": 0.02, "no": 0.98}}}]
    tab = table(tests, pairs=(("lamp.filament_open", "f.blown"),))
    rows = tab.observations[0]
    assert np.isnan(tab.samples[:, 0, :]).all()
    assert rows[tab.hypothesis_index("f.blown")] == pytest.approx([0.9, 0.1])
    assert rows[tab.hypothesis_index("lamp.filament_open")] == pytest.approx([0.3, 0.7])
    assert rows[tab.hypothesis_index("none")] == pytest.approx([0.02, 0.98])
    # a pair takes a fault-id row before a component row
    assert rows[tab.hypothesis_index("lamp.filament_open+f.blown")] == pytest.approx([0.9, 0.1])


def test_a_test_without_a_state_runs_in_the_first_state() -> None:
    tab = table([{"id": "v_s", "kind": "voltage", "at": "S"}])
    assert tab.tests[0].state == "off"
    assert shown(tab, "none", "v_s") == 0.0  # the switch is open in 'off'


def test_an_unknown_test_kind_raises() -> None:
    model = CircuitModel(build_ruleset(LAMP, states=STATES))
    with pytest.raises(CircuitError, match="ultrasound"):
        measurement_for(SimpleNamespace(id="t", kind="ultrasound", state=None), model)


def test_readings_are_quantised_to_the_range_in_use() -> None:
    tab = table([{"id": "v_a", "kind": "voltage", "at": "A", "state": "on"}], nominal=False, samples=32)
    values = tab.samples[:, 0, :]
    steps = values / tab.resolution[:, 0, :]
    assert np.allclose(steps, np.round(steps), atol=1e-6)
    # sigma is the ±(0.5 % + 2 counts) bound over sqrt(3)
    expected = (0.005 * np.abs(values) + 2 * tab.resolution[:, 0, :]) / np.sqrt(3)
    assert np.allclose(tab.sigma[:, 0, :], expected)


# --------------------------------------------------------------------------- looks that follow the circuit

LOOK = {"id": "look", "kind": "observation", "question": "Does the lamp light?", "state": "on",
        "outcomes": ["lit", "out"], "misjudged": 0.02,
        "seen": {"parts": ["lamp"], "lit_above": 0.25, "answers": {"lit": ["lit"], "out": ["dark"]}}}


def _lamp_share(hypothesis: str = "none") -> float:
    """The lamp's current over its rated 21 W / 12 V = 1.75 A: the current from the drop along
    its 2 m feed wire of 1 mm2 copper (rho 1.7241e-8 ohm m at 20 C, IEC 60028)."""
    volts = nominal_volts(build_ruleset(LAMP, states=STATES), hypothesis, "on")
    return (volts["S"] - volts["A"]) / (1.7241e-8 * 2.0 / 1e-6) / 1.75


def test_a_seen_look_follows_the_lamp_current() -> None:
    tab = table([LOOK])
    rows, info = tab.observations[0], tab.tests[0]
    assert info.misjudged == 0.02
    # the answer each variant shows, as its index: lit with no fault, out with the filament or
    # the fuse open; the rows are those answers with one glance in fifty misjudged
    for hyp, answer in (("none", 0), ("lamp.filament_open", 1), ("f.blown", 1), ("sw.stuck_open", 1)):
        assert shown(tab, hyp, "look") == answer, hyp
        assert rows[tab.hypothesis_index(hyp)] == pytest.approx([0.98, 0.02] if answer == 0 else [0.02, 0.98])
    # switched off, the same lamp is dark, but for a switch stuck closed or its wire touching power
    off = table([{**LOOK, "state": "off"}])
    lit_off = {off.hypotheses[h].id for h in range(len(off.hypotheses)) if off.samples[h, 0, 0] == 0}
    assert lit_off == {"sw.stuck_closed", "w.short_to_power"}


def test_lit_above_and_full_above_are_shares_of_the_rated_current() -> None:
    share = _lamp_share()
    assert share == pytest.approx(1.0, abs=0.1)  # 12.6 V less the wiring's drop on a 12 V lamp
    levels = {"lit": ["full"], "dim": ["dim"], "out": ["dark"]}
    for full_above, answer in ((share - 0.01, 0), (share + 0.01, 1)):
        look = {**LOOK, "outcomes": ["lit", "dim", "out"],
                "seen": {"parts": ["lamp"], "full_above": full_above, "answers": levels}}
        assert shown(table([look]), "none", "look") == answer
    # a corroded lamp holder: dark when its share is under lit_above, lit over it
    corroded = _lamp_share("lamp.high_resistance")
    assert corroded < 0.9
    look = {**LOOK, "seen": {"parts": ["lamp"], "lit_above": corroded + 0.01,
                             "answers": {"lit": ["lit"], "out": ["dark"]}}}
    assert shown(table([look]), "lamp.high_resistance", "look") == 1
    look["seen"]["lit_above"] = corroded - 0.01  # type: ignore[index]
    assert shown(table([look]), "lamp.high_resistance", "look") == 0


def test_side_by_side_judges_the_parts_against_the_brightest() -> None:
    # the lamp and the 30 mA sleep load both pass about their rated current with no fault: even;
    # a corroded holder leaves the lamp under 90 % of the load's share: the lamp is the dimmer
    look = {**LOOK, "outcomes": ["even", "lamp_dimmer", "load_dimmer"],
            "seen": {"parts": ["lamp", "sleep"], "full_above": 0.9, "side_by_side": True,
                     "answers": {"even": [["full", "full"], ["dim", "dim"], ["dark", "dark"]],
                                 "lamp_dimmer": [["dim", "full"], ["dark", "full"], ["dark", "dim"]],
                                 "load_dimmer": [["full", "dim"], ["full", "dark"], ["dim", "dark"]]}}}
    tab = table([look])
    assert shown(tab, "none", "look") == 0
    assert _lamp_share("lamp.high_resistance") < 0.9 * _lamp_share()
    assert shown(tab, "lamp.high_resistance", "look") == 1


def test_only_lamps_loads_and_relay_coils_are_seen() -> None:
    with pytest.raises(CircuitError, match="'w', which is not a lamp, load or relay coil"):
        table([{**LOOK, "seen": {"parts": ["w"], "answers": {"lit": ["lit"], "out": ["dark"]}}}])


# A relay clicks as its coil pulls in (common practice): its coil fed through a switch, its
# contact feeding a lamp. The coil's pull-in against Ohm's law: 12.6 V over 80 ohm is 157.5 mA.
RELAY = [
    {"id": "b", "type": "battery", "nodes": ["P", "GND"], "emf": "12.6 V"},
    {"id": "f", "type": "fuse", "nodes": ["P", "F"], "rating": "10 A"},
    {"id": "sw", "type": "switch", "nodes": ["F", "S"]},
    {"id": "coil", "type": "relay_coil", "nodes": ["S", "GND"], "resistance": "80 ohm", "tolerance": 0,
     "pull_in": "50 mA"},
    {"id": "k", "type": "relay_contact", "nodes": ["F", "A"], "coil": "coil"},
    {"id": "lamp", "type": "lamp", "nodes": ["A", "GND"], "rating": "21 W"},
]
CLICK = {"id": "click", "kind": "observation", "question": "Does the relay click as the switch goes on?",
         "state": "on", "misjudged": 0.02,
         "seen": {"parts": ["coil"], "since": "off", "answers": {"yes": ["pulled_in"], "no": ["released"]}}}


def test_a_relay_is_heard_where_its_coil_pulls_in() -> None:
    tab = table([CLICK], RELAY)
    # pulled in with no fault (157.5 mA over its 50 mA pull-in); silent with its coil, its feed
    # switch or its fuse open; the contact's own faults do not stop the coil pulling in
    for hyp, answer in (("none", 0), ("coil.open", 1), ("sw.stuck_open", 1), ("f.blown", 1),
                        ("k.stuck_open", 0), ("lamp.filament_open", 0)):
        assert shown(tab, hyp, "click") == answer, hyp
    assert tab.observations[0][tab.hypothesis_index("coil.open")] == pytest.approx([0.02, 0.98])
    # a switch stuck closed holds the coil in already with the switch off: nothing to hear
    assert shown(tab, "sw.stuck_closed", "click") == 1
    # without since, a coil held in counts as pulled in
    plain = table([{**CLICK, "seen": {"parts": ["coil"], "answers": {"yes": ["pulled_in"], "no": ["released"]}}}],
                  RELAY)
    assert shown(plain, "sw.stuck_closed", "click") == 0


def test_a_relay_pulls_in_at_its_pull_in_current() -> None:
    # 157.5 mA through the coil (Ohm's law, less the fuse's milliohms): a 150 mA pull-in is met,
    # a 165 mA one is not
    for pull_in, answer in (("150 mA", 0), ("165 mA", 1)):
        comps = [dict(c, pull_in=pull_in) if c["id"] == "coil" else c for c in RELAY]
        assert shown(table([CLICK], comps), "none", "click") == answer, pull_in


def test_a_look_can_hear_a_relay_and_see_its_lamp() -> None:
    look = {**CLICK, "outcomes": ["works", "clicks_dark", "silent"],
            "seen": {"parts": ["coil", "lamp"], "answers": {"works": ["pulled_in", "lit"],
                                                          "clicks_dark": ["pulled_in", "dark"],
                                                          "silent": ["released", "any"]}}}
    tab = table([look], RELAY)
    for hyp, answer in (("none", 0), ("k.stuck_open", 1), ("lamp.filament_open", 1), ("coil.open", 2)):
        assert shown(tab, hyp, "click") == answer, hyp
    # side by side, the lamp is judged against the brightest lamp, not against the relay's coil
    # (157.5 mA over a 50 mA pull-in is a share of 3, which would leave a full lamp "dim")
    look["seen"] = {"parts": ["coil", "lamp"], "full_above": 0.9, "side_by_side": True,
                    "answers": {"works": ["pulled_in", "full"], "dim": ["pulled_in", "dim"],
                                "clicks_dark": ["pulled_in", "dark"], "silent": ["released", "any"]}}
    look["outcomes"] = ["works", "dim", "clicks_dark", "silent"]
    assert shown(table([look], RELAY), "none", "click") == 0
