"""A drawing of a ruleset's circuit as modelled, so an author can see the netlist is what was meant.

Test points (the ruleset's nodes) are ellipses with where to probe them and the tests that use
them; components are boxes with their values, joined to the nodes they connect. A switch's
edges show in which operating states it is closed; with a state chosen, an open contact is
drawn dashed. The graph is built as DOT text by :func:`circuit_graph` (no I/O) and rendered by
:func:`render_graph`, which falls back to writing the DOT source when Graphviz's ``dot``
program is missing.
"""

from __future__ import annotations

import logging
from collections import defaultdict
from collections.abc import Callable
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import graphviz

from assistant.circuit.components import lamp_hot_ohms, wire_ohms
from assistant.errors import OhmtrailError, OutputError
from assistant.ruleset.model import (
    Battery,
    ComponentBase,
    Connector,
    CurrentTest,
    DropTest,
    Fuse,
    FuseDropTest,
    Ground,
    Lamp,
    Load,
    ModuleSupply,
    Motor,
    Node,
    RelayCoil,
    RelayContact,
    ResistanceTest,
    Resistor,
    Ruleset,
    Sensor,
    Switch,
    VoltageTest,
    Wire,
)

log = logging.getLogger("ohmtrail.netgraph")

FORMATS = ("svg", "png", "pdf", "dot")
# Parts drawn as boxes (sources, three-terminal parts, relays); the rest as lines between nodes.
_BOXED = frozenset({"battery", "module_supply", "sensor", "relay_contact", "relay_coil"})
_TERMINALS = {
    "battery": ("+", "-"),
    "module_supply": ("out", "return"),
    "sensor": ("supply", "signal", "ground"),
}


def si(value: float, unit: str) -> str:
    """A value with an SI prefix and at most 4 significant digits: ``0.0312, 'ohm'`` -> ``31.2 mΩ``."""
    symbol = {"ohm": "Ω"}.get(unit, unit)
    if value == 0:
        return f"0 {symbol}"
    for factor, prefix in ((1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "µ")):
        if abs(value) >= factor * 0.9995:
            return f"{value / factor:.4g} {prefix}{symbol}"
    return f"{value:.4g} {symbol}"


def _battery(c: Battery, rs: Ruleset) -> str:
    low, high = c.emf
    emf = si(low, "V") if low == high else f"{si(low, 'V')} to {si(high, 'V')}"
    return f"EMF {emf}, internal {si(c.internal_resistance, 'ohm')}"


def _wire(c: Wire, rs: Ruleset) -> str:
    r = wire_ohms(c.length, c.section, c.temperature)
    return f"{c.length:.3g} m × {c.section * 1e6:.3g} mm², ≈ {si(r, 'ohm')} at {c.temperature:g} °C"


def _fuse(c: Fuse, rs: Ruleset) -> str:
    return f"{si(c.rating, 'A')} fuse"


def _contact(c: Switch | Ground, rs: Ruleset) -> str:
    return si(c.resistance, "ohm")


def _connector(c: Connector, rs: Ruleset) -> str:
    return si(c.resistance, "ohm") + (f", pin {c.pin}" if c.pin else "")


def _relay_contact(c: RelayContact, rs: Ruleset) -> str:
    return f"{si(c.resistance, 'ohm')}, normally {c.normally}, coil {c.coil}"


def _relay_coil(c: RelayCoil, rs: Ruleset) -> str:
    return f"{si(c.resistance, 'ohm')}, pull-in {si(c.pull_in, 'A')}"


def _lamp(c: Lamp, rs: Ruleset) -> str:
    volts = c.rated_voltage or rs.system_voltage
    cat = f" {c.lamp_category}" if c.lamp_category else ""
    return f"{si(c.rating, 'W')}{cat} at {si(volts, 'V')}, hot {si(lamp_hot_ohms(c.rating, volts), 'ohm')}"


def _motor(c: Motor, rs: Ruleset) -> str:
    return f"armature {si(c.resistance, 'ohm')}, running {si(c.running_current, 'A')}"


def _module_supply(c: ModuleSupply, rs: Ruleset) -> str:
    states = f", powered in {', '.join(c.states)}" if c.states else ""
    return f"{si(c.voltage, 'V')} behind {si(c.internal_resistance, 'ohm')}{states}"


def _resistor(c: Resistor, rs: Ruleset) -> str:
    return f"{si(c.resistance, 'ohm')} {c.role}"


def _sensor(c: Sensor, rs: Ruleset) -> str:
    if c.kind == "ratiometric" and c.ratio is not None:
        return f"ratiometric, signal {c.ratio:.3g} × supply"
    return f"resistive, {si(c.resistance or 0.0, 'ohm')}"


def _load(c: Load, rs: Ruleset) -> str:
    awake = f" (awake {si(c.awake_current, 'A')})" if c.awake_current else ""
    return f"draws {si(c.current, 'A')}{awake}"


_VALUES: dict[type, Callable[[Any, Ruleset], str]] = {
    Battery: _battery, Wire: _wire, Fuse: _fuse, Switch: _contact, Ground: _contact, Connector: _connector,
    RelayContact: _relay_contact, RelayCoil: _relay_coil, Lamp: _lamp, Motor: _motor,
    ModuleSupply: _module_supply, Resistor: _resistor, Sensor: _sensor, Load: _load,
}


def component_values(comp: ComponentBase, ruleset: Ruleset) -> str:
    """The values of a component as the author wrote them, in readable units."""
    describe = _VALUES.get(type(comp))
    if describe is None:
        raise OhmtrailError(f"no drawing for component type {type(comp).__name__}")
    return describe(comp, ruleset)


def _tests_by_node(ruleset: Ruleset) -> dict[str, list[str]]:
    found: dict[str, list[str]] = defaultdict(list)
    comps = {c.id: c for c in ruleset.components}
    for test in ruleset.tests:
        nodes: tuple[str, ...] = ()
        if isinstance(test, VoltageTest):
            nodes = (test.at,)
        elif isinstance(test, (DropTest, ResistanceTest)):
            nodes = test.between
        elif isinstance(test, CurrentTest) and test.component in comps:
            nodes = comps[test.component].nodes[:1]
        elif isinstance(test, FuseDropTest) and test.fuse in comps:
            nodes = comps[test.fuse].nodes
        for node in nodes:
            found[node].append(test.id)
    return found


@dataclass(frozen=True)
class Drawing:
    """A rendered drawing: where it went, its format, and a hint when it fell back to DOT source."""

    path: Path
    format: str
    hint: str | None = None


def circuit_graph(ruleset: Ruleset, state: str | None = None) -> graphviz.Graph:
    """The Graphviz graph of the circuit; with ``state``, contacts drawn open or closed as it sets them."""
    if state is not None and state not in ruleset.states:
        raise OhmtrailError(f"unknown state '{state}'; the ruleset has: {', '.join(ruleset.states)}")
    closes_in: dict[str, list[str]] = defaultdict(list)
    for name, st in ruleset.states.items():
        for ref in st.closes:
            closes_in[ref].append(name)
    title = f"{ruleset.id} {ruleset.version}: {ruleset.title}"
    if state is not None:
        title += f"\nstate: {ruleset.states[state].label} ({state})"
    g = graphviz.Graph(name=ruleset.id, graph_attr={
        "rankdir": "LR", "label": title, "labelloc": "t", "fontname": "Helvetica", "fontsize": "12"},
        node_attr={"fontname": "Helvetica", "fontsize": "10"}, edge_attr={"fontname": "Helvetica", "fontsize": "8"})
    tests_at = _tests_by_node(ruleset)
    nodes = dict(ruleset.nodes)
    nodes.setdefault(ruleset.ground, Node(label="reference ground"))
    for name, node in nodes.items():
        lines = [name]
        if node.label:
            lines.append(node.label)
        place = " ".join(p for p in (node.connector, node.pin and f"pin {node.pin}", node.wire) if p)
        if place:
            lines.append(place)
        tests = tests_at.get(name, [])
        if tests:
            lines.append("tests: " + ", ".join(tests[:3]) + (f" +{len(tests) - 3}" if len(tests) > 3 else ""))
        attrs = {"shape": "ellipse"}
        if name == ruleset.ground:
            attrs.update(style="bold")
        g.node(f"node_{name}", "\n".join(lines), **attrs)
    for comp in ruleset.components:
        label = [f"{comp.id} ({comp.type})"]
        if comp.label:
            label.append(comp.label)
        label.append(component_values(comp, ruleset))
        open_now = False
        if comp.type == "switch":
            where = closes_in.get(comp.id, [])
            label.append("closed in: " + (", ".join(where) if where else "no state"))
            open_now = state is not None and state not in where
            if state is not None:
                label.append("OPEN now" if open_now else "CLOSED now")
        edge_style = {"style": "dashed"} if open_now else {}
        if comp.type not in _BOXED:
            # a two-terminal part reads best as the line between its nodes, as on a diagram
            g.edge(f"node_{comp.nodes[0]}", f"node_{comp.nodes[1]}", "\n".join(label), **edge_style)
        else:
            g.node(f"comp_{comp.id}", "\n".join(label), shape="box", style="rounded")
            names = _TERMINALS.get(comp.type, ())
            for i, terminal in enumerate(comp.nodes):
                g.edge(f"comp_{comp.id}", f"node_{terminal}", names[i] if i < len(names) else None, **edge_style)
        if comp.type == "relay_contact":
            g.edge(f"comp_{comp.id}", f"comp_{comp.coil}", style="dotted", label="operated by")
    return g


def render_graph(graph: graphviz.Graph, fmt: str, path: str | Path) -> Drawing:
    """Write the drawing in ``fmt`` (svg, png, pdf or dot) to ``path``.

    Without Graphviz's ``dot`` program the DOT source is written instead (beside ``path``,
    suffix ``.dot``) and the drawing says how to get the program.
    """
    if fmt not in FORMATS:
        raise OutputError(f"unknown format '{fmt}'; choose one of {', '.join(FORMATS)}")
    target = Path(path)
    hint = None
    try:
        data = graph.source.encode("utf-8") if fmt == "dot" else graph.pipe(format=fmt)
    except graphviz.ExecutableNotFound:
        target = target.with_suffix(".dot")
        data = graph.source.encode("utf-8")
        hint = (f"Graphviz 'dot' not found: wrote the DOT source to {target}; install graphviz "
                f"(Debian: apt-get install graphviz) or run: dot -T{fmt} {target} -o {Path(path).name}")
        fmt = "dot"
    except graphviz.CalledProcessError as exc:
        raise OutputError(f"graphviz failed to draw the circuit: {exc}") from exc
    try:
        target.write_bytes(data)
    except OSError as exc:
        raise OutputError(f"{target}: cannot write: {exc.strerror or exc}") from exc
    log.info("wrote %s (%s)", target, fmt)
    return Drawing(target, fmt, hint)
