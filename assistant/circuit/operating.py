"""Operating points: the circuit solved until its relays, fuses and motors agree with it.

A relay contact closes when its coil carries at least its pull-in current (a normally closed
one opens); a fuse whose current exceeds rating × blow_factor is blown and the circuit solved
again with it open; a motor that the supply would not drive forward against its back-EMF is
taken as stopped (a motor nothing drives does not generate). Each variant of the batch settles on its own. Fuses and motors only change one
way (a blown fuse stays blown, a stopped motor stays stopped), relays may go either way; a relay
that never settles (a coil fed through its own contact) is an error naming it.

A blown fuse stays blown in every state: :func:`operate_states` solves every energised state,
takes the union of the fuses blown in any of them, and solves again until that union is stable,
so a short that blows the fuse with the pedal pressed also leaves the feed dead with it released.
"""

from __future__ import annotations

import logging
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass

import numpy as np

from assistant.circuit.mna import Solution, solve
from assistant.circuit.netlist import Batch, Built, CircuitModel, Shunt
from assistant.errors import CircuitError

log = logging.getLogger("ohmtrail.circuit")

MAX_ROUNDS = 24
STOPPED_AMPS = 1e-9  # a motor the supply drives no forward current into is not turning


@dataclass(frozen=True, eq=False)
class OperatingPoint:
    """A settled netlist, its solution, and the states of its relays, fuses and motors."""

    state: str
    built: Built
    solution: Solution
    probes: tuple[tuple[str, str], ...]
    contact_closed: Mapping[str, np.ndarray]
    blown: Mapping[str, np.ndarray]
    stalled: Mapping[str, np.ndarray]

    def current(self, part: str) -> np.ndarray:
        """(B,) current through a part's main branch, from its first node to its second (0 if absent)."""
        j = self.built.main.get(part)
        if j is None:
            return np.zeros(self.solution.currents.shape[0])
        return self.solution.currents[:, j]

    def probe(self, a: str, b: str) -> int:
        return self.probes.index((a, b))


def operate(
    model: CircuitModel,
    batch: Batch,
    state: str,
    *,
    energised: bool = True,
    blown: Mapping[str, np.ndarray] | None = None,
    probes: Sequence[tuple[str, str]] = (),
    isolate: Iterable[str] = (),
    only: Iterable[str] = (),
    shunt: Shunt | None = None,
) -> OperatingPoint:
    """Solve one state of a batch until relays, fuses and motors are consistent with it."""
    B = batch.size
    blown_now = {f.id: (np.array(blown[f.id], dtype=bool) if blown and f.id in blown else np.zeros(B, dtype=bool))
                 for f in model.fuses}
    contacts = {c.id: np.full(B, c.normally_closed) for c in model.contacts}
    stalled = {m.id: np.zeros(B, dtype=bool) for m in model.motors}
    probes = tuple(probes)
    isolate, only = tuple(isolate), tuple(only)
    history: list[dict[str, np.ndarray]] = []
    for _ in range(MAX_ROUNDS):
        built = model.netlist(batch, state, energised=energised, contact_closed=contacts, blown=blown_now,
                              stalled=stalled, isolate=isolate, only=only, shunt=shunt)
        idx = [(built.net.index(a), built.net.index(b)) for a, b in probes]
        sol = solve(built.net, idx)
        point = OperatingPoint(state, built, sol, probes, contacts, blown_now, stalled)
        if not energised:
            return point
        new_contacts = {}
        for c in model.contacts:
            pulled = np.abs(point.current(c.coil)) >= float(model.by_id[c.coil].spec.pull_in)
            new_contacts[c.id] = ~pulled if c.normally_closed else pulled
        new_blown = {f.id: blown_now[f.id] | (np.abs(point.current(f.id)) > f.blow_amps) for f in model.fuses}
        new_stalled = {m.id: stalled[m.id] | (point.current(m.id) < STOPPED_AMPS) for m in model.motors}
        same = (_equal(new_contacts, contacts) and _equal(new_blown, blown_now) and _equal(new_stalled, stalled))
        if same:
            return point
        history.append(contacts)
        contacts, blown_now, stalled = new_contacts, new_blown, new_stalled
    chattering = sorted(c for c in contacts if any(not np.array_equal(h[c], contacts[c]) for h in history[-4:]))
    raise CircuitError("the relay contacts never settle (a coil switched by its own contact?): "
                       + ", ".join(chattering or sorted(contacts)), components=chattering)


def operate_states(
    model: CircuitModel,
    batch: Batch,
    probes: Mapping[str, Sequence[tuple[str, str]]],
) -> dict[str, OperatingPoint]:
    """Every operating state of the ruleset, solved with the fuses any state blows blown in all."""
    blown: dict[str, np.ndarray] | None = None
    for _ in range(len(model.fuses) + 2):
        points = {s: operate(model, batch, s, blown=blown, probes=probes.get(s, ())) for s in model.states}
        union = {f.id: np.logical_or.reduce([p.blown[f.id] for p in points.values()]) for f in model.fuses}
        if blown is not None and _equal(union, blown):
            return points
        if not any(u.any() for u in union.values()):
            return points
        blown = union
    log.debug("fuse states still changing after %d passes", len(model.fuses) + 2)
    return points


def _equal(a: Mapping[str, np.ndarray], b: Mapping[str, np.ndarray]) -> bool:
    return all(np.array_equal(a[k], b[k]) for k in a)
