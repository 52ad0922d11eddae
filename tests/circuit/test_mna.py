"""The batched nodal solver against textbook worked examples, and its refusals.

Method: modified nodal analysis (Ho, Ruehli & Brennan, IEEE Trans. Circuits and Systems, 1975).
"""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from assistant.circuit.mna import Branch, Netlist, Vccs, solve
from assistant.errors import CircuitError


def _net(nodes: list[str], elements: list[tuple[str, int, int, float, float]], batch: int = 1) -> Netlist:
    branches = tuple(Branch(name, a, b, np.full(batch, r), np.full(batch, e), np.ones(batch, dtype=bool))
                     for name, a, b, r, e in elements)
    return Netlist(tuple(nodes), branches, (), batch)


def test_series_circuit_boylestad() -> None:
    # Boylestad, Introductory Circuit Analysis, series-circuit worked example (from memory):
    # E = 20 V, R1 = 2 ohm, R2 = 1 ohm, R3 = 5 ohm: RT = 8 ohm, I = 2.5 A, V1 = 5 V, V2 = 2.5 V, V3 = 12.5 V.
    # The source is a 0-ohm branch, so this also exercises the current rows of the "modified" part.
    net = _net(["0", "a", "b", "c"], [("E", 1, 0, 0.0, 20.0), ("R1", 1, 2, 2.0, 0.0), ("R2", 2, 3, 1.0, 0.0),
                                       ("R3", 3, 0, 5.0, 0.0)])
    sol = solve(net)
    v = sol.volts[0]
    assert sol.currents[0, 1] == pytest.approx(2.5, rel=1e-12)
    assert v[1] - v[2] == pytest.approx(5.0, rel=1e-12)
    assert v[2] - v[3] == pytest.approx(2.5, rel=1e-12)
    assert v[3] == pytest.approx(12.5, rel=1e-12)
    assert sol.currents[0, 0] == pytest.approx(-2.5, rel=1e-12)  # the source delivers: current b -> a


def test_parallel_circuit_boylestad() -> None:
    # Boylestad, Introductory Circuit Analysis, parallel-circuit worked example (from memory):
    # E = 27 V across R1 = 9 ohm and R2 = 18 ohm: RT = 6 ohm, Is = 4.5 A, I1 = 3 A, I2 = 1.5 A.
    net = _net(["0", "a"], [("E", 1, 0, 0.0, 27.0), ("R1", 1, 0, 9.0, 0.0), ("R2", 1, 0, 18.0, 0.0)])
    sol = solve(net)
    assert sol.currents[0, 1] == pytest.approx(3.0, rel=1e-12)
    assert sol.currents[0, 2] == pytest.approx(1.5, rel=1e-12)
    assert -sol.currents[0, 0] == pytest.approx(4.5, rel=1e-12)


def test_divider_and_voltmeter_loading_floyd() -> None:
    # Floyd, Electric Circuit Fundamentals, the loading effect of a voltmeter (method from memory;
    # numbers derived here [D]): 12 V across 10 k + 10 k reads 6 V unloaded; the Thevenin
    # resistance at the tap is 5 k, so a 10 M input reads 6 * 10e6 / (10e6 + 5e3) = 5.997001 V.
    net = _net(["0", "top", "tap"], [("E", 1, 0, 0.0, 12.0), ("R1", 1, 2, 10e3, 0.0), ("R2", 2, 0, 10e3, 0.0)])
    sol = solve(net, probes=[(2, 0)])
    assert sol.volts[0, 2] == pytest.approx(6.0, rel=1e-12)
    thevenin = sol.response[0, 2, 0]
    assert thevenin == pytest.approx(5e3, rel=1e-12)
    assert sol.volts[0, 2] * 10e6 / (10e6 + thevenin) == pytest.approx(5.997001, rel=1e-6)


def test_balanced_wheatstone_bridge() -> None:
    # A bridge is not series-parallel; balanced (R1/R2 = R3/R4) its detector reads 0 V and carries
    # no current (Wheatstone bridge balance condition, any circuits textbook).
    net = _net(["0", "top", "l", "r"], [("E", 1, 0, 0.0, 10.0), ("R1", 1, 2, 100.0, 0.0), ("R2", 2, 0, 200.0, 0.0),
                                          ("R3", 1, 3, 50.0, 0.0), ("R4", 3, 0, 100.0, 0.0), ("Rd", 2, 3, 7.0, 0.0)])
    sol = solve(net)
    assert sol.volts[0, 2] == pytest.approx(20.0 / 3.0, rel=1e-12)
    assert abs(sol.currents[0, 5]) < 1e-12


def test_battery_with_internal_resistance() -> None:
    # Terminal voltage of a loaded source: V = E - I r (any circuits textbook):
    # E = 12.6 V, r = 0.05 ohm, load 1.2 ohm: I = 12.6 / 1.25 = 10.08 A, V = 12.096 V [D].
    net = _net(["0", "p"], [("bat", 1, 0, 0.05, 12.6), ("load", 1, 0, 1.2, 0.0)])
    sol = solve(net)
    assert sol.volts[0, 1] == pytest.approx(12.096, rel=1e-12)


def test_batch_variants_are_independent_and_removed_elements_are_gone() -> None:
    # three variants of one divider: nominal, R2 doubled, R2 removed (an open, not 1e9 ohm)
    active = np.array([True, True, False])
    branches = (
        Branch("E", 1, 0, np.zeros(3), np.full(3, 12.0), np.ones(3, dtype=bool)),
        Branch("R1", 1, 2, np.full(3, 10.0), np.zeros(3), np.ones(3, dtype=bool)),
        Branch("R2", 2, 0, np.array([10.0, 20.0, 10.0]), np.zeros(3), active),
    )
    sol = solve(Netlist(("0", "top", "tap"), branches, (), 3))
    assert sol.volts[:, 2] == pytest.approx([6.0, 8.0, 12.0], rel=1e-12)
    assert sol.currents[2, 2] == 0.0  # exactly: the element is not there
    assert abs(sol.currents[2, 1]) < 1e-12  # a 1e9 ohm stand-in would leak 1.2e-8 A here


def test_floating_island_is_detected_and_solved_relative_to_itself() -> None:
    # a 3 V cell between x and y, cut off from the ground: an island; inside it the cell's
    # voltage is exact, across islands nothing is defined
    net = _net(["0", "p", "x", "y"], [("bat", 1, 0, 0.1, 12.0), ("load", 1, 0, 10.0, 0.0), ("cell", 2, 3, 0.5, 3.0),
                                       ("r", 2, 3, 100.0, 0.0)])
    sol = solve(net)
    assert sol.island[0, 1] == 0 and sol.island[0, 0] == 0
    assert sol.island[0, 2] == sol.island[0, 3] > 0
    v = sol.volts[0]
    assert v[2] - v[3] == pytest.approx(3.0 * 100.0 / 100.5, rel=1e-12)


def test_vccs_ratiometric_output() -> None:
    # a current gm * V(c) into node o, loaded by 1 k: V(o) = 1000 * gm * V(c) = 0.5 * 5 = 2.5 V
    branches = (Branch("ref", 1, 0, np.zeros(1), np.full(1, 5.0), np.ones(1, dtype=bool)),
                Branch("load", 2, 0, np.full(1, 1000.0), np.zeros(1), np.ones(1, dtype=bool)))
    sources = (Vccs("sensor", 2, 0, 1, 0, np.full(1, 0.5e-3), np.ones(1, dtype=bool)),)
    sol = solve(Netlist(("0", "c", "o"), branches, sources, 1))
    assert sol.volts[0, 2] == pytest.approx(2.5, rel=1e-12)


def test_loop_of_zero_resistance_parts_names_them() -> None:
    # two 0-ohm links in parallel leave the split of current between them undefined
    net = _net(["0", "a", "b"], [("bat", 1, 0, 0.01, 12.0), ("sw1", 1, 2, 0.0, 0.0), ("sw2", 1, 2, 0.0, 0.0),
                                  ("lamp", 2, 0, 6.86, 0.0)])
    with pytest.raises(CircuitError) as err:
        solve(net)
    assert set(err.value.components) == {"sw1", "sw2"}
    assert "sw1" in str(err.value) and "sw2" in str(err.value)


def test_ideal_sources_in_a_loop_are_refused() -> None:
    # two ideal (0-ohm) sources of different EMF in parallel: no solution exists
    net = _net(["0", "a"], [("e1", 1, 0, 0.0, 12.0), ("e2", 1, 0, 0.0, 11.0)])
    with pytest.raises(CircuitError) as err:
        solve(net)
    assert set(err.value.components) == {"e1", "e2"}


def test_singular_controlled_source_is_a_circuit_error_not_linalg() -> None:
    # a VCCS that exactly cancels its own load's conductance makes the equations singular
    branches = (Branch("load", 1, 0, np.full(1, 100.0), np.zeros(1), np.ones(1, dtype=bool)),)
    sources = (Vccs("odd", 1, 0, 1, 0, np.full(1, 0.01), np.ones(1, dtype=bool)),)
    with pytest.raises(CircuitError) as err:
        solve(Netlist(("0", "a"), branches, sources, 1))
    assert "load" in err.value.components


def _stop_lamp_net():  # type: ignore[no-untyped-def]
    from pathlib import Path

    from assistant.circuit.netlist import CircuitModel
    from assistant.predict import hypotheses_of
    from assistant.ruleset.load import load_ruleset

    ruleset = load_ruleset(Path(__file__).resolve().parents[2] / "rulesets" / "lamp" / "stop_lamps.yaml").ruleset
    model = CircuitModel(ruleset)
    _, members = hypotheses_of(ruleset)
    return model.netlist(model.batch(members, 3), "pedal_pressed").net


@pytest.mark.parametrize("path", ["elimination", "sparse"])
def test_every_solver_path_agrees_with_the_dense_batch(path: str, monkeypatch: pytest.MonkeyPatch) -> None:
    # large circuits go through the batched sparse elimination (or, where a pivot is doubtful,
    # a sparse LU per variant); every path must give the dense LAPACK answer
    from assistant.circuit import mna

    net = _stop_lamp_net()
    dense = solve(net, probes=[(3, 0)])
    monkeypatch.setattr(mna, "DENSE_UP_TO", 0)
    if path == "sparse":
        monkeypatch.setattr(mna, "SPARSE_ABOVE", 0)
        monkeypatch.setattr(mna.Elimination, "solve", lambda self, data, z: (np.zeros_like(z), np.ones(len(z), bool)))
    other = solve(net, probes=[(3, 0)])
    assert np.allclose(other.volts, dense.volts, rtol=1e-12, atol=1e-12)
    assert np.allclose(other.response, dense.response, rtol=1e-10, atol=1e-12)
    assert np.array_equal(other.island, dense.island)


def test_elimination_hands_back_a_zero_pivot(monkeypatch: pytest.MonkeyPatch) -> None:
    # a node joined only by 0-ohm branches (an ideal source and a switch) has no conductance on
    # its diagonal: the elimination must flag it and the pivoting LU must answer (12 V on 6 ohm)
    from assistant.circuit import mna

    monkeypatch.setattr(mna, "DENSE_UP_TO", 0)
    net = _net(["0", "a", "b"], [("E", 1, 0, 0.0, 12.0), ("sw", 1, 2, 0.0, 0.0), ("R", 2, 0, 6.0, 0.0)])
    pattern = mna._Pattern(net, [0, 1])
    _, redo = mna._plan(pattern, 2).solve(pattern.values(net), np.zeros((1, pattern.size, 1)))
    assert redo.all()
    sol = solve(net)
    assert sol.volts[0, 2] == pytest.approx(12.0, rel=1e-12)
    assert sol.currents[0, 2] == pytest.approx(2.0, rel=1e-12)


@st.composite
def _networks(draw):  # type: ignore[no-untyped-def]
    """A random connected resistor network with one battery, as branch tuples."""
    n = draw(st.integers(min_value=2, max_value=9))
    elements = [("bat", 1, 0, draw(st.floats(0.001, 1.0)), draw(st.floats(1.0, 24.0)))]
    for node in range(2, n + 1):  # a spanning tree keeps every node connected
        elements.append((f"t{node}", draw(st.integers(0, node - 1)), node, draw(st.floats(0.01, 1e4)), 0.0))
    for k in range(draw(st.integers(0, 8))):
        a, b = draw(st.integers(0, n)), draw(st.integers(0, n))
        if a != b:
            elements.append((f"x{k}", a, b, draw(st.floats(0.01, 1e4)), 0.0))
    return n, elements


@settings(max_examples=60, deadline=None)
@given(_networks())
def test_kirchhoff_and_the_maximum_principle_hold_on_random_networks(network) -> None:  # type: ignore[no-untyped-def]
    # Kirchhoff's current law at every node, and (one source, the rest passive) every node
    # voltage between the battery's terminals: invariants of any resistive network
    n, elements = network
    sol = solve(_net([str(i) for i in range(n + 1)], elements))
    currents = sol.currents[0]
    for node in range(1, n + 1):
        leaving = sum(i for (name, a, b, _, _), i in zip(elements, currents, strict=True) if a == node)
        entering = sum(i for (name, a, b, _, _), i in zip(elements, currents, strict=True) if b == node)
        assert abs(leaving - entering) <= 1e-9 * (1 + max(abs(currents).max(), 1.0))
    v = sol.volts[0]
    slack = 1e-8 * abs(v[1])  # round-off of a system whose conductances span six decades
    assert v.min() >= -slack and v.max() <= v[1] + slack


def test_no_ground_is_refused_naming_the_parts() -> None:
    from assistant.circuit.netlist import CircuitModel
    from assistant.ruleset.model import Ruleset

    doc = {"format": 1, "id": "floating", "title": "t", "family": "lamp", "version": "1", "system_voltage": 12,
           "nodes": {"P": {}, "N": {}, "GND": {}},
           "components": [{"id": "b", "type": "battery", "nodes": ["P", "N"], "emf": 12.6},
                          {"id": "lamp", "type": "lamp", "nodes": ["P", "N"], "rating": 21}],
           "states": {"on": {"label": "on"}}, "tests": [{"id": "v", "kind": "voltage", "at": "P"}]}
    with pytest.raises(CircuitError) as err:
        CircuitModel(Ruleset.model_validate(doc))
    assert "GND" in str(err.value) and set(err.value.components) == {"b", "lamp"}
