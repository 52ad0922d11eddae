"""Operating points: the circuit solved until its relays, fuses and motors agree with it.

A relay contact closes when its coil carries at least its pull-in current (a normally closed
one opens) and holds until the coil current falls below 40 % of it (drop-out, from memory). A
fuse whose current exceeds rating × blow_factor is blown and the circuit solved again with it
open (of several overloaded fuses in one variant, the most overloaded goes first, as the branch
fuse clears a short before the fuse feeding it); a motor that the supply would not drive forward
against its back-EMF is taken as stopped (a motor nothing drives does not generate). Each variant
of the batch settles on its own. Fuses and motors only change one way (a blown fuse stays blown,
a stopped motor stays stopped), so every variant settles.

A relay that its own load makes chatter (a weak supply collapses when the contact closes, and
the coil lets go) settles at rest; what a meter shows across the chatter is then taken as half
way between that and the circuit with the contact held closed (:func:`_across_chatter`).

A blown fuse stays blown in every state: :func:`operate_states` solves every energised state,
takes the union of the fuses blown in any of them, and solves again until that union is stable,
so a short that blows the fuse with the pedal pressed also leaves the feed dead with it released.
"""

from __future__ import annotations

import logging
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from assistant.circuit.mna import Netlist, Solution, solve, subset
from assistant.circuit.netlist import Batch, Built, CircuitModel, Shunt
from assistant.errors import CircuitError

log = logging.getLogger("ohmtrail.circuit")

MAX_ROUNDS = 24
DROP_OUT = 0.4  # a pulled-in relay holds down to this fraction of its pull-in current: from memory
CHATTER_TOGGLES = 3  # a contact that changes this often in one solve is chattering
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


def _blow_most_overloaded(fuses: Sequence[Any], point: OperatingPoint,
                          blown: Mapping[str, np.ndarray]) -> dict[str, np.ndarray]:
    """The fuses blown after this round: in each variant, of the fuses carrying more than their
    blow current, only the most overloaded one goes (a fuse's time to blow falls steeply with
    its overload, so a 10 A branch fuse clears a dead short long before the 30 A fuse feeding
    it: the selectivity of fuses in series, common practice); the circuit is then solved again
    and a fuse still overloaded goes in a later round."""
    if not fuses:
        return dict(blown)
    ratio = np.stack([np.abs(point.current(f.id)) / f.blow_amps for f in fuses])  # (F, B)
    over = ratio > 1.0
    worst = np.argmax(np.where(over, ratio, 0.0), axis=0)
    return {f.id: blown[f.id] | (over[i] & (worst == i)) for i, f in enumerate(fuses)}


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
    start: OperatingPoint | None = None,
) -> OperatingPoint:
    """Solve one state of a batch until relays, fuses and motors are consistent with it.

    Only the variants whose relays, fuses or motors changed are solved again each round. With
    ``start`` (an earlier point of the same state and probes), the search resumes from it and
    solves only the variants whose ``blown`` fuses differ from it.
    """
    B = batch.size
    blown_now = {f.id: (np.array(blown[f.id], dtype=bool) if blown and f.id in blown else np.zeros(B, dtype=bool))
                 for f in model.fuses}
    pulled = {c.id: np.zeros(B, dtype=bool) for c in model.contacts}
    stalled = {m.id: np.zeros(B, dtype=bool) for m in model.motors}
    setting = _Setting(model, batch, state, energised, tuple(probes), tuple(isolate), tuple(only), shunt)
    solution: Solution | None = None
    todo = np.ones(B, dtype=bool)
    if start is not None:
        pulled = {c.id: start.contact_closed[c.id] ^ c.normally_closed for c in model.contacts}
        stalled = {m: np.array(v) for m, v in start.stalled.items()}
        blown_now = {f: blown_now[f] | start.blown[f] for f in blown_now}
        todo = np.zeros(B, dtype=bool)
        for f in blown_now:
            todo |= blown_now[f] != start.blown[f]
        # the variants solved again enter the state afresh: relays at rest, motors judged anew
        pulled = {c: np.where(todo, False, v) for c, v in pulled.items()}
        stalled = {m: np.where(todo, False, v) for m, v in stalled.items()}
        solution = start.solution
    point, pulled, toggles = _settle(setting, pulled, blown_now, stalled, todo, solution)
    return _across_chatter(setting, point, pulled, toggles) if energised else point


@dataclass(frozen=True, eq=False)
class _Setting:
    """What one :func:`operate` call solves: the batch, state and measuring set-up."""

    model: CircuitModel
    batch: Batch
    state: str
    energised: bool
    probes: tuple[tuple[str, str], ...]
    isolate: tuple[str, ...]
    only: tuple[str, ...]
    shunt: Shunt | None


def _settle(setting: _Setting, pulled: dict[str, np.ndarray], blown_now: dict[str, np.ndarray],
            stalled: dict[str, np.ndarray], todo: np.ndarray, solution: Solution | None,
            hold: Mapping[str, np.ndarray] | None = None
            ) -> tuple[OperatingPoint, dict[str, np.ndarray], dict[str, np.ndarray]]:
    """Solve rounds until relays, fuses and motors agree: (the point, the relays pulled in, how
    often each contact changed). ``hold``: contacts held pulled in, in the variants marked,
    whatever their coils carry; with it no fuse blows (see :func:`_across_chatter`)."""
    model, B, state = setting.model, setting.batch.size, setting.state
    toggles = {c.id: np.zeros(B, dtype=int) for c in model.contacts}
    for _ in range(MAX_ROUNDS):
        contacts = {c.id: pulled[c.id] ^ c.normally_closed for c in model.contacts}
        built = model.netlist(setting.batch, state, energised=setting.energised, contact_closed=contacts,
                              blown=blown_now, stalled=stalled, isolate=setting.isolate, only=setting.only,
                              shunt=setting.shunt, keep_nodes={n for pair in setting.probes for n in pair})
        if todo.any():
            idx = [(built.net.index(a), built.net.index(b)) for a, b in setting.probes]
            solution = _solve_some(built.net, idx, todo, solution)
        assert solution is not None
        point = OperatingPoint(state, built, solution, setting.probes, contacts, blown_now, stalled)
        if not setting.energised:
            return point, pulled, toggles
        new_pulled = {}
        for c in model.contacts:
            coil_amps = np.abs(point.current(c.coil))
            pull_in = float(model.by_id[c.coil].spec.pull_in)
            now = np.where(pulled[c.id], coil_amps >= DROP_OUT * pull_in, coil_amps >= pull_in)
            toggles[c.id] = toggles[c.id] + (now != pulled[c.id])
            # a relay its own load makes chatter cannot hold in: at rest here, and read across its
            # chatter by _across_chatter
            new_pulled[c.id] = now & (toggles[c.id] < CHATTER_TOGGLES)
            if hold is not None:
                new_pulled[c.id] |= hold[c.id]
        new_blown = blown_now if hold is not None else _blow_most_overloaded(model.fuses, point, blown_now)
        new_stalled = stalled
        changed = _changed(new_pulled, pulled, B) | _changed(new_blown, blown_now, B)
        if not changed.any():
            # motors are judged once relays and fuses have settled around them
            new_stalled = {m.id: stalled[m.id] | (point.current(m.id) < STOPPED_AMPS) for m in model.motors}
            changed = _changed(new_stalled, stalled, B)
            if not changed.any():
                return point, pulled, toggles
        pulled, blown_now, stalled, todo = new_pulled, new_blown, new_stalled, changed
    raise CircuitError(f"the circuit in state '{state}' does not settle after {MAX_ROUNDS} rounds of relays, "
                       "fuses and motors: " + ", ".join(sorted(pulled)), components=sorted(pulled))


def _across_chatter(setting: _Setting, point: OperatingPoint, pulled: dict[str, np.ndarray],
                    toggles: Mapping[str, np.ndarray]) -> OperatingPoint:
    """The settled point, with its chattering variants read as a meter reads across a chatter.

    A relay its own load makes chatter spends part of its time closed (the supply collapsing
    under the load it switches) and part open (the supply recovering); a meter, averaging over a
    few cycles, shows a value between the two, unsteady. The chattering variants are settled
    again with those contacts held closed (other relays and the motors free to follow, fuses as
    they were: the closures are too brief to blow one), and their voltages, currents and source
    resistances taken as the mean of the two: half the time each, a modelling choice. The
    contacts are reported at rest. A variant whose floating islands differ between the two keeps
    the at-rest solution (a voltage across two islands has no meaning).
    """
    model = setting.model
    hold = {c.id: toggles[c.id] >= CHATTER_TOGGLES for c in model.contacts}
    chatter = np.logical_or.reduce(list(hold.values())) if hold else np.zeros(setting.batch.size, dtype=bool)
    if not chatter.any():
        return point
    free = {m: np.where(chatter, False, v) for m, v in point.stalled.items()}  # judged anew
    for _ in range(len(model.contacts)):
        held = {c: v | hold[c] for c, v in pulled.items()}
        closed, _, again = _settle(setting, held, dict(point.blown), free, chatter, point.solution, hold)
        # a relay that chatters only once another is held in (the solenoid a held starter relay
        # feeds) closes with it in the same cycle: hold it too
        more = {c: hold[c] | (chatter & (again[c] >= CHATTER_TOGGLES)) for c in hold}
        if not _changed(more, hold, setting.batch.size).any():
            break
        hold = more
    rest, other = point.solution, closed.solution
    rows = np.nonzero(chatter & np.all(rest.island == other.island, axis=1))[0]
    log.debug("%d variants chatter in state %s: read half the time closed", rows.size, setting.state)
    volts, currents, response = rest.volts.copy(), rest.currents.copy(), rest.response.copy()
    volts[rows] = 0.5 * (rest.volts[rows] + other.volts[rows])
    currents[rows] = 0.5 * (rest.currents[rows] + other.currents[rows])
    response[rows] = 0.5 * (rest.response[rows] + other.response[rows])
    return OperatingPoint(point.state, point.built, Solution(volts, rest.island, currents, response),
                          point.probes, point.contact_closed, point.blown, point.stalled)


def _solve_some(net: Netlist, probes: list[tuple[int, int]], todo: np.ndarray,
                previous: Solution | None) -> Solution:
    """Solve the variants in ``todo``; the others keep their previous solution."""
    if previous is None or todo.all():
        return solve(net, probes)
    part = solve(subset(net, todo), probes)
    volts, island = previous.volts.copy(), previous.island.copy()
    currents, response = previous.currents.copy(), previous.response.copy()
    volts[todo], island[todo], currents[todo], response[todo] = part.volts, part.island, part.currents, part.response
    return Solution(volts, island, currents, response)


def _changed(new: Mapping[str, np.ndarray], old: Mapping[str, np.ndarray], size: int) -> np.ndarray:
    out = np.zeros(size, dtype=bool)
    for key, value in new.items():
        out |= value != old[key]
    return out


def operate_states(
    model: CircuitModel,
    batch: Batch,
    probes: Mapping[str, Sequence[tuple[str, str]]],
) -> dict[str, OperatingPoint]:
    """Every operating state of the ruleset, solved with the fuses any state blows blown in all."""
    points = {s: operate(model, batch, s, probes=probes.get(s, ())) for s in model.states}
    for _ in range(len(model.fuses) + 1):
        union = {f.id: np.logical_or.reduce([p.blown[f.id] for p in points.values()]) for f in model.fuses}
        if all(_equal(union, p.blown) for p in points.values()):
            return points
        points = {s: operate(model, batch, s, blown=union, probes=probes.get(s, ()), start=p)
                  for s, p in points.items()}
    log.debug("fuse states still changing after %d passes", len(model.fuses) + 1)
    return points


def _equal(a: Mapping[str, np.ndarray], b: Mapping[str, np.ndarray]) -> bool:
    return all(np.array_equal(a[k], b[k]) for k in a)
