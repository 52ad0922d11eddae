"""Component models against published figures, and each type's behaviour in a circuit."""

from __future__ import annotations

from types import SimpleNamespace

import numpy as np
import pytest

from assistant.circuit.components import PART_TYPES, lamp_hot_ohms, part_for, wire_ohms
from assistant.circuit.netlist import CircuitModel
from assistant.circuit.operating import operate_states
from assistant.errors import CircuitError
from assistant.predict import hypotheses_of
from assistant.ruleset.model import COMPONENT_TYPES
from assistant.ruleset.quantities import AREA, parse_quantity

from conftest import build_ruleset, nominal_volts

# IEC 60228, class 5 (flexible) plain copper, maximum resistance at 20 °C in mOhm/m
IEC_60228_CLASS_5_MAX = {0.5: 39.0, 0.75: 26.0, 1.0: 19.5, 1.5: 13.3, 2.5: 7.98, 4.0: 4.95, 6.0: 3.30}


def test_every_component_type_of_the_format_has_a_model() -> None:
    assert set(PART_TYPES) == set(COMPONENT_TYPES)


def test_an_unknown_component_type_raises() -> None:
    ruleset = build_ruleset([{"id": "b", "type": "battery", "nodes": ["P", "GND"], "emf": 12.6},
                             {"id": "l", "type": "resistor", "nodes": ["P", "GND"], "resistance": 10}])
    with pytest.raises(CircuitError, match="flux_capacitor"):
        part_for(SimpleNamespace(id="x", type="flux_capacitor", nodes=("P", "GND")), ruleset)


@pytest.mark.parametrize("mm2", sorted(IEC_60228_CLASS_5_MAX))
def test_copper_per_metre_within_iec_60228_class_5(mm2: float) -> None:
    # IEC 60228 class 5: our annealed-copper value must not exceed the standard's maximum, and
    # sits within 15 % below it (the maximum allows for stranding and tinning)
    milliohm_per_m = wire_ohms(1.0, mm2 * 1e-6) * 1e3
    maximum = IEC_60228_CLASS_5_MAX[mm2]
    assert milliohm_per_m <= maximum
    assert milliohm_per_m >= 0.85 * maximum


@pytest.mark.parametrize("celsius,k", [(10, 1.042), (25, 0.980), (40, 0.926), (60, 0.862), (80, 0.806)])
def test_copper_temperature_against_iec_60228_correction(celsius: float, k: float) -> None:
    # IEC 60228 temperature correction R20 = Rt * k; our linear 0.00393 /K (IACS) within 0.5 %
    r20 = wire_ohms(1.0, 1e-6, 20.0)
    rt = wire_ohms(1.0, 1e-6, celsius)
    assert rt * k == pytest.approx(r20, rel=5e-3)


def test_awg_18_against_floyd_wire_table() -> None:
    # Floyd, Electric Circuit Fundamentals, wire table: 18 AWG solid copper 20.9 mOhm/m at 20 °C
    area = parse_quantity("18 AWG", AREA)
    assert wire_ohms(1.0, area) * 1e3 == pytest.approx(20.9, rel=0.01)


def test_p21w_hot_resistance_and_current_ece_r37() -> None:
    # UN ECE Regulation 37, P21W rated 12 V 21 W: R = V^2/P = 6.86 ohm, I = P/V = 1.75 A [D]
    assert lamp_hot_ohms(21.0, 12.0) == pytest.approx(6.86, abs=0.005)
    ruleset = build_ruleset([
        {"id": "b", "type": "battery", "nodes": ["P", "GND"], "emf": "12 V", "internal_resistance": "1e-9 ohm"},
        {"id": "lamp", "type": "lamp", "nodes": ["P", "GND"], "rating": "21 W", "tolerance": 0},
    ])
    v = nominal_volts(ruleset)
    assert v["P"] / lamp_hot_ohms(21.0, 12.0) == pytest.approx(1.75, rel=1e-6)


def test_cold_filament_is_a_tenth_to_a_fifteenth_of_hot() -> None:
    # general lamp engineering references: tungsten cold resistance about 1/10-1/15 of hot
    ruleset = build_ruleset([{"id": "b", "type": "battery", "nodes": ["P", "GND"], "emf": 12.6},
                             {"id": "lamp", "type": "lamp", "nodes": ["P", "GND"], "rating": 21}])
    part = part_for(ruleset.components[1], ruleset)
    nominal = part.nominal()
    assert 10 <= nominal["hot"] / nominal["cold"] <= 15


def test_motor_running_draws_its_running_current_and_stalled_its_stall_current() -> None:
    # DC machine steady state V = E + I R_a: at rated voltage it draws its running current;
    # seized, E = 0 and it draws V / R_a
    comps = [{"id": "b", "type": "battery", "nodes": ["P", "GND"], "emf": "12 V", "internal_resistance": "1e-9 ohm"},
             {"id": "w", "type": "resistor", "nodes": ["P", "M"], "resistance": "0.001 ohm", "tolerance": 0},
             {"id": "m", "type": "motor", "nodes": ["M", "GND"], "resistance": "0.5 ohm", "running_current": "5 A",
              "tolerance": 0}]
    ruleset = build_ruleset(comps)
    v = nominal_volts(ruleset)
    # E = 12 - 5 x 0.5 = 9.5 V; with the 1 mOhm sense resistor I = 2.5 / 0.501 = 4.990 A [D]
    assert (v["P"] - v["M"]) / 0.001 == pytest.approx(2.5 / 0.501, rel=1e-6)
    v = nominal_volts(ruleset, "m.seized")
    assert (v["P"] - v["M"]) / 0.001 == pytest.approx(12.0 / 0.501, rel=1e-3)
    v = nominal_volts(ruleset, "m.worn")  # slower: less back-EMF, more current
    assert (v["P"] - v["M"]) / 0.001 > 5.5


def test_unpowered_motor_does_not_generate() -> None:
    comps = [{"id": "b", "type": "battery", "nodes": ["P", "GND"], "emf": 12.6},
             {"id": "sw", "type": "switch", "nodes": ["P", "M"]},
             {"id": "m", "type": "motor", "nodes": ["M", "GND"], "resistance": 0.5, "running_current": 5}]
    ruleset = build_ruleset(comps, states={"off": {"label": "off"}, "on": {"label": "on", "closes": ["sw"]}})
    assert nominal_volts(ruleset, state="off")["M"] == pytest.approx(0.0, abs=1e-12)
    assert nominal_volts(ruleset, state="on")["M"] > 12.0


RELAY = [
    {"id": "b", "type": "battery", "nodes": ["P", "GND"], "emf": 12.6},
    {"id": "sw", "type": "switch", "nodes": ["P", "C"]},
    {"id": "coil", "type": "relay_coil", "nodes": ["C", "GND"], "resistance": "80 ohm", "pull_in": "0.05 A"},
    {"id": "k", "type": "relay_contact", "nodes": ["P", "L"], "coil": "coil"},
    {"id": "lamp", "type": "lamp", "nodes": ["L", "GND"], "rating": 55},
]


def test_relay_contact_follows_its_coil() -> None:
    ruleset = build_ruleset(RELAY, states={"off": {"label": "off"}, "on": {"label": "on", "closes": ["sw"]}})
    assert nominal_volts(ruleset, state="off")["L"] == pytest.approx(0.0, abs=1e-12)
    assert nominal_volts(ruleset, state="on")["L"] > 12.0
    # an open coil never pulls the contact in; a stuck-closed contact lights the lamp with the switch off
    assert nominal_volts(ruleset, "coil.open", state="on")["L"] == pytest.approx(0.0, abs=1e-12)
    assert nominal_volts(ruleset, "k.stuck_closed", state="off")["L"] > 12.0


def test_normally_closed_contact_opens_when_pulled_in() -> None:
    comps = [dict(c) for c in RELAY]
    comps[3]["normally"] = "closed"
    ruleset = build_ruleset(comps, states={"off": {"label": "off"}, "on": {"label": "on", "closes": ["sw"]}})
    assert nominal_volts(ruleset, state="off")["L"] > 12.0
    assert nominal_volts(ruleset, state="on")["L"] == pytest.approx(0.0, abs=1e-12)


def test_weak_coil_below_pull_in_leaves_the_contact_open() -> None:
    comps = [dict(c) for c in RELAY]
    comps[2]["resistance"] = "1 kohm"  # 12.6 mA, under the 50 mA pull-in
    ruleset = build_ruleset(comps, states={"on": {"label": "on", "closes": ["sw"]}})
    assert nominal_volts(ruleset, state="on")["L"] == pytest.approx(0.0, abs=1e-12)


def test_fuse_over_its_blow_current_is_resolved_open() -> None:
    # 10 A fuse, blow factor 1.35: a 1 ohm load draws ~12.6 A < 13.5 A (holds); 0.5 ohm ~25 A (blows)
    def ruleset(load: str):  # type: ignore[no-untyped-def]
        return build_ruleset([{"id": "b", "type": "battery", "nodes": ["P", "GND"], "emf": 12.6},
                              {"id": "f", "type": "fuse", "nodes": ["P", "F"], "rating": 10},
                              {"id": "r", "type": "resistor", "nodes": ["F", "GND"], "resistance": load}])
    assert nominal_volts(ruleset("1 ohm"))["F"] > 12.0
    assert nominal_volts(ruleset("0.5 ohm"))["F"] == pytest.approx(0.0, abs=1e-12)


def test_module_supply_off_in_key_off_and_ratiometric_sensor_signal() -> None:
    comps = [{"id": "ecu", "type": "module_supply", "nodes": ["REF", "GND"], "voltage": "5 V",
              "internal_resistance": "1e-6 ohm", "tolerance": 0},
             {"id": "tps", "type": "sensor", "kind": "ratiometric", "nodes": ["REF", "SIG", "GND"], "ratio": 0.2,
              "tolerance": 0},
             {"id": "pull", "type": "resistor", "nodes": ["SIG", "GND"], "resistance": "1 Gohm"}]
    ruleset = build_ruleset(comps, states={"key_on": {"label": "on"}, "key_off": {"label": "off"}})
    v = nominal_volts(ruleset, state="key_on")
    assert v["REF"] == pytest.approx(5.0, rel=1e-6)
    assert v["SIG"] == pytest.approx(1.0, rel=1e-6)  # 0.2 x 5 V
    assert nominal_volts(ruleset, state="key_off")["SIG"] == pytest.approx(0.0, abs=1e-12)


def test_load_draws_its_current_at_system_voltage() -> None:
    comps = [{"id": "b", "type": "battery", "nodes": ["P", "GND"], "emf": "12 V", "internal_resistance": "1e-9 ohm"},
             {"id": "shunt", "type": "resistor", "nodes": ["P", "M"], "resistance": "0.001 ohm", "tolerance": 0},
             {"id": "ecu", "type": "load", "nodes": ["M", "GND"], "current": "30 mA", "awake_current": "0.5 A",
              "tolerance": 0}]
    ruleset = build_ruleset(comps)
    v = nominal_volts(ruleset)
    assert (v["P"] - v["M"]) / 0.001 == pytest.approx(0.030, rel=1e-3)
    v = nominal_volts(ruleset, "ecu.stays_awake")
    assert (v["P"] - v["M"]) / 0.001 == pytest.approx(0.5, rel=1e-3)


# a battery with 6 ohm inside, a relay coil of 80 ohm pulling in at 50 mA (holding to 20 mA), and
# a motor of 0.5 ohm running 23 A at 12 V (back-EMF 12 - 23 x 0.5 = 0.5 V)
WEAK_BATTERY = {"id": "b", "type": "battery", "nodes": ["P", "GND"], "emf": 12.6, "internal_resistance": "6 ohm",
                "tolerance": 0}
RELAY_COIL = {"id": "coil", "type": "relay_coil", "nodes": ["P", "GND"], "resistance": "80 ohm", "pull_in": "50 mA",
              "tolerance": 0}
SMALL_MOTOR = {"id": "m", "type": "motor", "nodes": ["M", "GND"], "resistance": "0.5 ohm", "running_current": "23 A",
               "tolerance": 0}


def _contact(cid: str, a: str, b: str, coil: str) -> dict[str, object]:
    return {"id": cid, "type": "relay_contact", "nodes": [a, b], "coil": coil, "resistance": "0.01 ohm", "tolerance": 0}


def test_a_relay_its_own_load_makes_chatter_reads_half_way_between_open_and_closed() -> None:
    # at rest the coil draws 12.6 / 86 = 147 mA and pulls in; closed, the motor pulls the supply to
    # about 1.42 V and the coil to 17.8 mA, under its hold [D]: the contact chatters. A meter
    # averages across the chatter: half the time at rest, half closed (modelling choice).
    comps = [WEAK_BATTERY, RELAY_COIL, _contact("k", "P", "M", "coil"), SMALL_MOTOR]
    v = nominal_volts(build_ruleset(comps))
    rest_p, rest_m = 12.6 * 80 / 86, 0.0  # open: the coil alone on the battery; M dead
    # closed, by hand (Kirchhoff's current law at P and M, the motor turning: it is driven forward):
    # (12.6 - P)/6 = P/80 + (P - M)/0.01 and (P - M)/0.01 = (M - 0.5)/0.5
    g = np.array([[1 / 6 + 1 / 80 + 100, -100], [-100, 100 + 2]])
    closed_p, closed_m = np.linalg.solve(g, [12.6 / 6, 0.5 / 0.5])
    assert closed_m > 0.5 and (closed_p / 80) < 0.4 * 0.05  # turning, and under the coil's hold
    assert v["P"] == pytest.approx((rest_p + closed_p) / 2, rel=1e-9)
    assert v["M"] == pytest.approx((rest_m + closed_m) / 2, rel=1e-9)
    # with a healthy battery (10 mOhm) the same relay holds and the motor runs
    comps[0] = dict(comps[0], internal_resistance="0.01 ohm")
    assert nominal_volts(build_ruleset(comps))["M"] > 12.0


def test_a_relay_that_chatters_only_once_another_is_held_closes_with_it() -> None:
    # the starter's chain: relay k feeds the solenoid's coil, the solenoid's contact the motor. k
    # pulls in, the solenoid pulls in on the 4.9 V left (1.22 A in its 4 ohm, over its 1 A), the
    # motor collapses the supply to about 1.3 V and both let go: k chatters, and with k held in,
    # the solenoid chatters in its turn. The meter reads half way between all at rest and both
    # held closed (modelling choice).
    winding = {"id": "winding", "type": "relay_coil", "nodes": ["S", "GND"], "resistance": "4 ohm",
               "pull_in": "1 A", "tolerance": 0}
    comps = [WEAK_BATTERY, RELAY_COIL, _contact("k", "P", "S", "coil"), winding,
             _contact("sol", "P", "M", "winding"), SMALL_MOTOR]
    v = nominal_volts(build_ruleset(comps))
    rest = {"P": 12.6 * 80 / 86, "S": 0.0, "M": 0.0}
    # both closed, by hand: Kirchhoff's current law at P, S and M
    g = np.array([[1 / 6 + 1 / 80 + 100 + 100, -100, -100],
                  [-100, 100 + 1 / 4, 0],
                  [-100, 0, 100 + 2]])
    closed = dict(zip("PSM", np.linalg.solve(g, [12.6 / 6, 0.0, 0.5 / 0.5])))
    assert closed["P"] / 80 < 0.4 * 0.05 and closed["S"] / 4 < 0.4 * 1.0  # both would let go
    for node in "PSM":
        assert v[node] == pytest.approx((rest[node] + closed[node]) / 2, rel=1e-9), node


def test_a_battery_emf_range_spans_the_lead_acid_table_75_to_100_percent() -> None:
    # Lead-acid open-circuit voltage table (FACTS.md [S]): 12.45 V at 75 %, 12.65 V at 100 %.
    # A healthy battery in service is anywhere in between; the engine draws it uniformly, and the
    # nominal circuit takes the middle.
    ruleset = build_ruleset([
        {"id": "b", "type": "battery", "nodes": ["P", "GND"], "emf": ["12.45 V", "12.65 V"],
         "internal_resistance": "1e-9 ohm"},
        {"id": "r", "type": "resistor", "nodes": ["P", "GND"], "resistance": "1 kohm", "tolerance": 0},
    ])
    assert nominal_volts(ruleset)["P"] == pytest.approx(12.55, abs=1e-6)
    model = CircuitModel(ruleset)
    _, members = hypotheses_of(ruleset, [])
    batch = model.batch([m for m in members if m[0] == "none"], 2000, seed=3)
    point = operate_states(model, batch, {})[model.state(None)]
    volts = point.solution.volts[:, point.built.net.nodes.index("P")]
    assert volts.min() >= 12.45 - 1e-6 and volts.max() <= 12.65 + 1e-6
    assert volts.min() < 12.46 and volts.max() > 12.64  # the whole range, not one value
    assert abs(float(np.mean(volts)) - 12.55) < 0.01  # uniform: its mean is the middle


@pytest.mark.parametrize("emf", [["12.65 V", "12.45 V"], ["0 V", "12 V"], "-1 V"])
def test_a_battery_emf_range_must_be_ordered_and_positive(emf: object) -> None:
    with pytest.raises(ValueError, match="emf"):
        build_ruleset([{"id": "b", "type": "battery", "nodes": ["P", "GND"], "emf": emf},
                       {"id": "r", "type": "resistor", "nodes": ["P", "GND"], "resistance": 10}])
