"""The circuit of a ruleset as netlists: one per operating state, measurement and batch.

:class:`CircuitModel` holds the parts of one ruleset. :meth:`CircuitModel.batch` draws the
values of every part for a batch of hypotheses × samples and injects each hypothesis's faults;
:meth:`CircuitModel.netlist` turns a batch into the primitives of ``mna.py`` for one operating
state (which switches are closed, which relay contacts have pulled in, which fuses have blown,
which motors turn), de-energised for an ohmmeter or with the meter's shunt in series.

Node 0 is the ruleset's ground; then the declared nodes in file order; then any node a component
names that is not declared; then nodes a measurement adds (the meter's shunt terminal).
"""

from __future__ import annotations

from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field

import numpy as np

from assistant.circuit.components import (
    BatteryPart,
    FusePart,
    MotorPart,
    Part,
    RelayCoilPart,
    RelayContactPart,
    StampContext,
    Values,
    part_for,
)
from assistant.circuit.faults import Short, inject, stream
from assistant.circuit.mna import Branch, Netlist, Vccs
from assistant.errors import CircuitError
from assistant.ruleset.defaults import Fault
from assistant.ruleset.model import Ruleset

METER = "meter"  # owner name of the meter's shunt branch


@dataclass(frozen=True, eq=False)
class Batch:
    """Values of every part for H hypotheses × S samples (variant ``h·S + s``), faults injected."""

    hypotheses: tuple[str, ...]
    samples: int
    values: Mapping[str, Values]
    shorts: tuple[Short, ...]

    @property
    def size(self) -> int:
        return len(self.hypotheses) * self.samples


@dataclass(frozen=True)
class Shunt:
    """The meter in series: the part's first terminal moved to a new node, the shunt between."""

    part: str
    ohms: float


@dataclass(eq=False)
class _Builder:
    nodes: list[str]
    batch: int
    shunt: Shunt | None = None
    branches: list[Branch] = field(default_factory=list)
    vccs_list: list[Vccs] = field(default_factory=list)
    main: dict[str, int] = field(default_factory=dict)
    part_nodes: Mapping[str, tuple[str, ...]] = field(default_factory=dict)
    positions: dict[str, int] = field(default_factory=dict)

    def index(self, node: str) -> int:
        if not self.positions:
            self.positions.update((name, i) for i, name in enumerate(self.nodes))
        if node not in self.positions:
            self.positions[node] = len(self.nodes)
            self.nodes.append(node)
        return self.positions[node]

    def node(self, part: str, terminal: int) -> str:
        if self.shunt is not None and self.shunt.part == part and terminal == 0:
            return f"{part}#meter"
        return self.part_nodes[part][terminal]

    def branch(self, owner: str, a: str, b: str, ohms: np.ndarray, emf: np.ndarray, active: np.ndarray,
               *, main: bool = False) -> None:
        if main:
            self.main[owner] = len(self.branches)
        self.branches.append(Branch(owner, self.index(a), self.index(b), np.asarray(ohms, dtype=float),
                                    np.asarray(emf, dtype=float), np.asarray(active, dtype=bool)))

    def vccs(self, owner: str, out_p: str, out_n: str, ctrl_p: str, ctrl_n: str, siemens: np.ndarray,
             active: np.ndarray) -> None:
        self.vccs_list.append(Vccs(owner, self.index(out_p), self.index(out_n), self.index(ctrl_p),
                                   self.index(ctrl_n), np.asarray(siemens, dtype=float),
                                   np.asarray(active, dtype=bool)))


@dataclass(frozen=True, eq=False)
class Built:
    """A netlist with the index of each part's main branch (the one its current flows in)."""

    net: Netlist
    main: Mapping[str, int]


class CircuitModel:
    """The parts of one ruleset, ready to be drawn, faulted and stamped."""

    def __init__(self, ruleset: Ruleset) -> None:
        self.ruleset = ruleset
        self.parts: tuple[Part, ...] = tuple(part_for(c, ruleset) for c in ruleset.components)
        self.by_id: dict[str, Part] = {p.id: p for p in self.parts}
        nodes = [ruleset.ground] + [n for n in ruleset.nodes if n != ruleset.ground]
        for part in self.parts:
            nodes += [n for n in part.nodes if n not in nodes]
        self.nodes: tuple[str, ...] = tuple(nodes)
        if not any(ruleset.ground in part.nodes for part in self.parts):
            raise CircuitError(f"no component connects to the ground node '{ruleset.ground}', so the circuit "
                               "has no reference: " + ", ".join(p.id for p in self.parts),
                               components=[p.id for p in self.parts])
        batteries = [p for p in self.parts if isinstance(p, BatteryPart)]
        self.power: str | None = ruleset.power or (batteries[0].nodes[0] if batteries else None)
        self.states: tuple[str, ...] = tuple(ruleset.states)
        self.fuses = tuple(p for p in self.parts if isinstance(p, FusePart))
        self.contacts = tuple(p for p in self.parts if isinstance(p, RelayContactPart))
        self.motors = tuple(p for p in self.parts if isinstance(p, MotorPart))
        for contact in self.contacts:
            if not isinstance(self.by_id.get(contact.coil), RelayCoilPart):
                raise CircuitError(f"relay contact '{contact.id}' names '{contact.coil}', which is not a "
                                   "relay_coil of this circuit", components=[contact.id])

    def state(self, name: str | None) -> str:
        """The operating state a test runs in: its own, or the ruleset's first."""
        if name is None:
            return self.states[0]
        if name not in self.ruleset.states:
            raise CircuitError(f"unknown operating state '{name}'")
        return name

    def batch(self, hypotheses: Sequence[tuple[str, Sequence[Fault]]], samples: int, *, seed: int = 0,
              nominal: bool = False) -> Batch:
        """Part values for every hypothesis × sample, tolerances drawn and faults injected.

        The tolerance draws are shared by all hypotheses (sample ``s`` is the same vehicle under
        every hypothesis), so differences between hypotheses are the faults' alone.
        """
        H = len(hypotheses)
        rng = stream(seed, "")
        values: dict[str, Values] = {}
        for part in self.parts:
            spread = np.zeros(samples) if nominal else rng.uniform(-1.0, 1.0, samples)
            values[part.id] = {k: np.tile(v, H) for k, v in part.values(spread).items()}
        shorts = inject(self.by_id, values, hypotheses, samples, seed=seed, nominal=nominal,
                        ground=self.ruleset.ground, power=self.power)
        return Batch(tuple(h for h, _ in hypotheses), samples, values, shorts)

    def netlist(
        self,
        batch: Batch,
        state: str,
        *,
        energised: bool = True,
        contact_closed: Mapping[str, np.ndarray] | None = None,
        blown: Mapping[str, np.ndarray] | None = None,
        stalled: Mapping[str, np.ndarray] | None = None,
        isolate: Iterable[str] = (),
        only: Iterable[str] = (),
        shunt: Shunt | None = None,
        keep_nodes: Iterable[str] = (),
    ) -> Built:
        """The netlist of a batch in one operating state (``keep_nodes``: nodes probes will name)."""
        keep_nodes = frozenset(keep_nodes)
        only_set = frozenset(only)
        parts = [p for p in self.parts if not only_set or p.id in only_set]
        ctx = StampContext(
            state=state,
            closes=frozenset(self.ruleset.states[state].closes),
            energised=energised,
            contact_closed=contact_closed or {},
            blown=blown or {},
            stalled=stalled or {},
            disconnected=frozenset(isolate),
            out_of_holder=only_set,
            batch=batch.size,
        )
        nodes = list(self.nodes)
        if only_set:  # on the bench: only the parts' own nodes (and any the probes name)
            nodes = [n for n in self.nodes if n == self.ruleset.ground or n in keep_nodes
                     or any(n in p.nodes for p in parts)]
        builder = _Builder(nodes, batch.size, shunt, part_nodes={p.id: p.nodes for p in self.parts})
        for part in parts:
            part.stamp(batch.values[part.id], ctx, builder)
        if not only_set:  # a part measured on the bench has no harness to be shorted to
            for short in batch.shorts:
                builder.branch(short.owner, short.a, short.b, short.ohms, np.zeros(batch.size), short.active)
        if shunt is not None:
            part = self.by_id[shunt.part]
            builder.branch(METER, part.nodes[0], f"{part.id}#meter", np.full(batch.size, shunt.ohms),
                           np.zeros(batch.size), np.ones(batch.size, dtype=bool), main=True)
        net = Netlist(tuple(builder.nodes), tuple(builder.branches), tuple(builder.vccs_list), batch.size)
        return Built(net, dict(builder.main))
