"""SPICE decks of a ruleset's circuit as modelled, for checking in any SPICE simulator.

The deck is the netlist the engine solves, at nominal values (no tolerance draws; fault
magnitudes at the middle of their ranges), in one operating state, after its relays, fuses and
motors have settled: a blown fuse, an open contact or a removed part appears as a comment, not
as an element. Each branch is a resistor, or an EMF source in series with a resistor (through an
internal node ``<node>_e<j>``), or a 0 V source where the resistance is zero; a ratiometric
sensor's output is a voltage-controlled current source (``G``). A node a fault left floating is
tied to 0 V through a 0 V source that carries no current, since a simulator needs a reference in
every island (the engine reads such a node the same way, relative to its island).

Several hypotheses can go in one deck as disjoint copies sharing the ground, their nodes
prefixed ``h<k>_``; one ``.op`` then solves them all.
"""

from __future__ import annotations

import re
from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from assistant.circuit.mna import GROUND
from assistant.circuit.netlist import CircuitModel
from assistant.circuit.operating import OperatingPoint, operate_states
from assistant.errors import CircuitError
from assistant.predict import hypotheses_of
from assistant.ruleset.model import Ruleset


@dataclass(frozen=True)
class Deck:
    """A SPICE deck and, for checking it, the node voltages the engine found."""

    text: str
    state: str
    hypotheses: tuple[str, ...]
    spice_nodes: dict[tuple[str, str], str]  # (hypothesis, circuit node) -> SPICE node name
    volts: dict[tuple[str, str], float]  # (hypothesis, circuit node) -> the engine's voltage


def spice_deck(ruleset: Ruleset, hypotheses: Sequence[str] = ("none",), state: str | None = None) -> Deck:
    """The deck of the circuit under one or more hypotheses (fault ids, "a+b" pairs, "none")."""
    model = CircuitModel(ruleset)
    state_name = model.state(state)
    wanted = tuple(hypotheses)
    pairs = tuple(tuple(h.split("+", 1)) for h in wanted if "+" in h)
    _, members = hypotheses_of(ruleset, pairs)  # type: ignore[arg-type]
    by_id = dict(members)
    for h in wanted:
        if h not in by_id:
            raise CircuitError(f"ruleset '{ruleset.id}' has no fault '{h}'")
    chosen = [(h, by_id[h]) for h in wanted]
    batch = model.batch(chosen, 1, nominal=True)
    point = operate_states(model, batch, {})[state_name]
    multi = len(wanted) > 1
    lines = [f"* ohmtrail: ruleset {ruleset.id} {ruleset.version}, state '{state_name}', nominal values",
             f"* hypotheses: {', '.join(wanted)}"]
    spice_nodes: dict[tuple[str, str], str] = {}
    volts: dict[tuple[str, str], float] = {}
    for v, hyp in enumerate(wanted):
        prefix = f"h{v}_" if multi else ""
        names = _node_names(point.built.net.nodes, prefix)
        lines.append(f"* --- hypothesis {hyp}")
        lines += _elements(point, v, names, prefix)
        for i, node in enumerate(point.built.net.nodes):
            spice_nodes[(hyp, node)] = names[i]
            volts[(hyp, node)] = float(point.solution.volts[v, i])
    lines += [".op", ".end", ""]
    return Deck("\n".join(lines), state_name, wanted, spice_nodes, volts)


def _node_names(nodes: Sequence[str], prefix: str) -> list[str]:
    names: list[str] = []
    for i, node in enumerate(nodes):
        if i == GROUND:
            names.append("0")
            continue
        name = prefix + re.sub(r"[^A-Za-z0-9_]", "_", node).lower()
        while name in names or name == "0":
            name += f"_{i}"
        names.append(name)
    return names


def _num(value: float) -> str:
    return repr(float(value))


def _elements(point: OperatingPoint, v: int, names: list[str], prefix: str) -> list[str]:
    net, sol = point.built.net, point.solution
    lines: list[str] = []
    for j, br in enumerate(net.branches):
        a, b = names[br.a], names[br.b]
        tag = f"{prefix}{j}"
        if not br.active[v]:
            lines.append(f"* {br.owner}: {net.nodes[br.a]}-{net.nodes[br.b]} open (removed)")
            continue
        ohms, emf = float(br.ohms[v]), float(br.emf[v])
        lines.append(f"* {br.owner}: {net.nodes[br.a]} -> {net.nodes[br.b]}")
        if ohms <= 0:
            lines.append(f"V{tag} {a} {b} {_num(emf)}")
        elif emf == 0:
            lines.append(f"R{tag} {a} {b} {_num(ohms)}")
        else:
            inner = f"{a if a != '0' else prefix + 'gnd'}_e{j}"
            lines.append(f"V{tag} {a} {inner} {_num(emf)}")
            lines.append(f"R{tag} {inner} {b} {_num(ohms)}")
    for k, src in enumerate(net.vccs):
        if not src.active[v]:
            continue
        lines.append(f"* {src.owner}: output {net.nodes[src.out_p]}, controlled by "
                     f"{net.nodes[src.ctrl_p]}-{net.nodes[src.ctrl_n]}")
        lines.append(f"G{prefix}{k} {names[src.out_n]} {names[src.out_p]} {names[src.ctrl_p]} "
                     f"{names[src.ctrl_n]} {_num(src.siemens[v])}")
    heads = [i for i in range(1, len(net.nodes)) if sol.island[v, i] > 0
             and not np.any(sol.island[v, 1:i] == sol.island[v, i])]
    for i in heads:
        lines.append(f"* {net.nodes[i]} floats (cut off from ground): tied to 0 V for a reference, no current")
        lines.append(f"Vfloat{prefix}{i} {names[i]} 0 0")
    return lines

