"""Measurement kinds: each test kind predicts what the meter displays under every variant.

- ``voltage``: the meter's input resistance from the node to the reference, applied through the
  Thevenin resistance the probes see (one extra right-hand side on the same factorisation). A
  node that a fault cut off from the reference reads what a 10 MΩ input on an open circuit
  reads: 0 V; two nodes of one floating island read the difference inside it.
- ``drop``: the same between two nodes, with the circuit working in its state.
- ``fuse_drop``: the drop across a fuse in place (millivolts: current × its cold resistance;
  the full gap voltage once it is blown).
- ``resistance``: the de-energised circuit (sources out, ``isolate`` taken out, or ``only`` the
  parts named, on the bench), driven by the meter's own source between the two nodes, plus the
  test leads; no path is OL.
- ``current``: the meter in series at the part's first node with its shunt burden (``isolate``
  taken out); the jack as the test asks, or chosen from the current expected with no fault; a
  clamp above the jack. The leads are placed so the no-fault current reads positive.
- ``observation``: no meter; the author's P(outcome) rows, picked by fault id, then component
  id, then ``default``. An observation with ``seen`` instead follows the circuit
  (:class:`SeenObservation`): in every variant, which of its parts pass at least ``lit_above``
  of their rated current, and which of its relay coils carry their pull-in current (released
  in ``since`` first, when given), gives the answer, so each simulated vehicle shows the answer
  its own part values and fault magnitude give.
"""

from __future__ import annotations

import math
from abc import ABC, abstractmethod
from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any, ClassVar

import numpy as np

from assistant.circuit.netlist import METER, Batch, CircuitModel, Shunt
from assistant.circuit.operating import OperatingPoint, operate
from assistant.errors import CircuitError
from assistant.meter import (
    Display,
    MeterProfile,
    choose_jack,
    current_accuracy,
    jack_scales,
    ohms_scales,
    scan_tool_display,
    show,
    volts_scales,
)


@dataclass(frozen=True, eq=False)
class Env:
    """What every measurement of one batch reads from: the solved states and the meter."""

    model: CircuitModel
    batch: Batch
    meter: MeterProfile
    points: Mapping[str, OperatingPoint]  # every energised state, settled
    blown: Mapping[str, np.ndarray]  # fuses blown in any state (they stay blown)
    reference: slice  # the variants of the no-fault hypothesis (for the jack choice)
    # de-energised set-ups (state, isolate, only) -> every probe pair the ohms tests need there
    ohms_probes: Mapping[tuple[str, tuple[str, ...], tuple[str, ...]], Sequence[tuple[str, str]]] = field(
        default_factory=dict)
    _deenergised: dict[tuple[str, tuple[str, ...], tuple[str, ...]], OperatingPoint] = field(
        default_factory=dict, repr=False)

    def deenergised(self, setup: tuple[str, tuple[str, ...], tuple[str, ...]],
                    probes: Sequence[tuple[str, str]]) -> OperatingPoint:
        """The de-energised circuit of one set-up, solved once for all its ohms tests."""
        point = self._deenergised.get(setup)
        if point is None:
            state, isolate, only = setup
            wanted = tuple(self.ohms_probes.get(setup, ())) or tuple(probes)
            point = operate(self.model, self.batch, state, energised=False, blown=self.blown, probes=wanted,
                            isolate=isolate, only=only)
            self._deenergised[setup] = point
        return point


def voltmeter(point: OperatingPoint, a: str, b: str, input_ohms: float) -> np.ndarray:
    """(B,) what a voltmeter of ``input_ohms`` reads from node ``a`` (red) to ``b`` (black)."""
    sol, net = point.solution, point.built.net
    ia, ib = net.index(a), net.index(b)
    k = point.probe(a, b)
    open_volts = sol.volts[:, ia] - sol.volts[:, ib]
    thevenin = np.maximum(sol.response[:, ia, k] - sol.response[:, ib, k], 0.0)
    same = sol.island[:, ia] == sol.island[:, ib]
    if math.isinf(input_ohms):  # a module's own input: its loading is in the circuit already
        return np.where(same, open_volts, 0.0)
    return np.where(same, open_volts * input_ohms / (input_ohms + thevenin), 0.0)


class Measurement(ABC):
    """One meter test of a ruleset, able to predict its display."""

    kind: ClassVar[str]
    unit: ClassVar[str]

    def __init__(self, test: Any, model: CircuitModel) -> None:
        self.test = test
        self.model = model
        self.state = model.state(test.state)

    def probes(self) -> tuple[tuple[str, str], ...]:
        """Node pairs the state's solve must carry a probe column for."""
        return ()

    @abstractmethod
    def points(self) -> tuple[str, ...]:
        """(red, black) nodes, or the part a current test breaks into."""

    @abstractmethod
    def display(self, env: Env) -> Display:
        """What the meter shows in every variant."""


class VoltageMeasurement(Measurement):
    kind = "voltage"
    unit = "V"

    def points(self) -> tuple[str, ...]:
        return (self.test.at, self.test.reference or self.model.ruleset.ground)

    def probes(self) -> tuple[tuple[str, str], ...]:
        red, black = self.points()
        return ((red, black),)

    def display(self, env: Env) -> Display:
        red, black = self.points()
        if getattr(self.test, "instrument", "meter") == "scan_tool":
            return scan_tool_display(voltmeter(env.points[self.state], red, black, math.inf))
        values = voltmeter(env.points[self.state], red, black, env.meter.dc_volts.input_resistance)
        return show(values, volts_scales(env.meter), env.meter.dc_volts.accuracy)


class DropMeasurement(VoltageMeasurement):
    kind = "drop"

    def points(self) -> tuple[str, ...]:
        return tuple(self.test.between)


class FuseDropMeasurement(VoltageMeasurement):
    kind = "fuse_drop"

    def points(self) -> tuple[str, ...]:
        part = self.model.by_id.get(self.test.fuse)
        if part is None:
            raise CircuitError(f"test '{self.test.id}' names fuse '{self.test.fuse}', not in the circuit")
        return part.nodes


class ResistanceMeasurement(Measurement):
    kind = "resistance"
    unit = "ohm"

    def points(self) -> tuple[str, ...]:
        return tuple(self.test.between)

    def setup(self) -> tuple[str, tuple[str, ...], tuple[str, ...]]:
        """What the circuit is for this test: its state, the parts out, the parts alone."""
        return (self.state, tuple(sorted(self.test.isolate)), tuple(sorted(self.test.only)))

    def display(self, env: Env) -> Display:
        a, b = self.points()
        point = env.deenergised(self.setup(), [(a, b)])
        sol, net = point.solution, point.built.net
        ia, ib = net.index(a), net.index(b)
        k = point.probe(a, b)
        ohms = np.maximum(sol.response[:, ia, k] - sol.response[:, ib, k], 0.0)
        ohms = np.where(sol.island[:, ia] == sol.island[:, ib], ohms + env.meter.ohms.lead_resistance, np.inf)
        return show(ohms, ohms_scales(env.meter), env.meter.ohms.accuracy)


class CurrentMeasurement(Measurement):
    kind = "current"
    unit = "A"

    def points(self) -> tuple[str, ...]:
        return (self.test.component,)

    @property
    def isolate(self) -> tuple[str, ...]:
        return tuple(getattr(self.test, "isolate", ()) or ())

    def display(self, env: Env) -> Display:
        part = self.test.component
        if part not in self.model.by_id:
            raise CircuitError(f"test '{self.test.id}' names '{part}', not in the circuit")
        base = env.points[self.state]
        if self.isolate:
            base = operate(self.model, env.batch, self.state, blown=env.blown, isolate=self.isolate)
        healthy = base.current(part)[env.reference]
        expected = float(np.median(healthy)) if healthy.size else 0.0
        # the leads go so that the healthy current reads positive (red on the supply side)
        sign = -1.0 if expected < 0 else 1.0
        jack = choose_jack(env.meter, expected, self.test.jack)
        scales_ = jack_scales(env.meter, jack)
        accuracy = current_accuracy(env.meter, jack)
        if jack == "clamp":
            return show(sign * base.current(part), scales_, accuracy)
        # auto-ranging within the jack: each range has its own shunt, so solve with each and
        # keep, per variant, the lowest range that holds the current it lets through
        chosen: np.ndarray | None = None
        found = np.zeros(env.batch.size, dtype=bool)
        for sc in scales_:
            point = operate(self.model, env.batch, self.state, blown=env.blown, isolate=self.isolate,
                            shunt=Shunt(part, sc.burden))
            amps = sign * point.current(METER)
            chosen = amps if chosen is None else np.where(found, chosen, amps)
            found |= np.abs(amps) <= sc.limit
        assert chosen is not None
        return show(chosen, scales_, accuracy)


MEASUREMENTS: dict[str, type[Measurement]] = {
    cls.kind: cls
    for cls in (VoltageMeasurement, DropMeasurement, FuseDropMeasurement, ResistanceMeasurement, CurrentMeasurement)
}


def measurement_for(test: Any, model: CircuitModel) -> Measurement:
    """The measurement of a meter test; an unknown kind raises CircuitError."""
    cls = MEASUREMENTS.get(getattr(test, "kind", None))  # type: ignore[arg-type]
    if cls is None:
        raise CircuitError(f"test '{getattr(test, 'id', '?')}' has kind '{getattr(test, 'kind', '?')}', "
                           "which no measurement model predicts")
    return cls(test, model)


def rated_current(spec: Any, system_voltage: float) -> float | None:
    """The current a part that lights passes at its rating: a lamp's watts over its rated
    voltage, a load's current; None for the others. (Not a motor: a seized one draws more than
    its running current and does not turn, so its current does not say whether it runs.)"""
    if spec.type == "lamp":
        return float(spec.rating) / float(spec.rated_voltage or system_voltage)
    if spec.type == "load":
        return float(spec.current)
    return None


class SeenObservation:
    """An observation whose answer follows the circuit (``seen``): which parts are lit, which
    relays pull in."""

    def __init__(self, test: Any, model: CircuitModel) -> None:
        self.test = test
        self.state = model.state(test.state)
        self.since = None if test.seen.since is None else model.state(test.seen.since)
        self.rated: list[float] = []  # the current each part is judged against
        self.relay: list[bool] = []  # a relay coil: pulled in at its pull-in current, no share of it
        for part in test.seen.parts:
            found = model.by_id.get(part)
            if found is not None and found.spec.type == "relay_coil":
                self.rated.append(float(found.spec.pull_in))
                self.relay.append(True)
                continue
            rated = rated_current(found.spec, model.ruleset.system_voltage) if found is not None else None
            if rated is None:
                raise CircuitError(f"test '{test.id}' looks at '{part}', which is not a lamp, load or relay coil "
                                   "of the circuit (only those have a current to be lit or pulled in against)")
            self.rated.append(rated)
            self.relay.append(False)

    def answers(self, env: Env) -> np.ndarray:
        """(B,) the index of the answer (in the test's outcomes) each variant shows."""
        point = env.points[self.state]
        seen = self.test.seen
        share = np.stack([np.abs(point.current(part)) / rated
                          for part, rated in zip(seen.parts, self.rated, strict=True)], axis=1)
        # each part's level: 0 dark, then lit (or dim, full), as in seen.levels
        level = (share >= seen.lit_above).astype(np.int64)
        if seen.full_above is not None:
            # side by side, against the brightest lamp or load (a relay coil is no lamp to compare)
            lamps = np.where(np.asarray(self.relay)[None, :], 0.0, share)
            brightest = lamps.max(axis=1, keepdims=True) if seen.side_by_side else 1.0
            level += (level > 0) & (share >= seen.full_above * brightest)
        top = len(seen.levels) - 1
        for j, part in enumerate(seen.parts):
            if not self.relay[j]:
                continue
            # a relay pulls in at its pull-in current (its top level: pulled_in fits lit, dim and
            # full alike); with since, only where it was released there (a click as it pulls in)
            pulled = share[:, j] >= 1.0
            if self.since is not None:
                pulled &= np.abs(env.points[self.since].current(part)) < self.rated[j]
            level[:, j] = np.where(pulled, top, 0)
        outcomes = list(self.test.outcomes)
        index = np.empty(level.shape[0], dtype=float)
        for combo in np.unique(level, axis=0):
            answer = seen.answer_of([seen.levels[int(x)] for x in combo])
            assert answer is not None  # the model checks every combination has an answer
            index[(level == combo).all(axis=1)] = outcomes.index(answer)
        return index


def seen_rows(answers: np.ndarray, n_outcomes: int, misjudged: float) -> np.ndarray:
    """(H, K) P(answer | hypothesis) from each variant's answer (shape (H, S)): the share of its
    samples showing each answer, with ``misjudged`` of each spread evenly over the others."""
    shown = np.stack([(answers == k).mean(axis=1) for k in range(n_outcomes)], axis=1)
    return (1.0 - misjudged) * shown + misjudged * (1.0 - shown) / (n_outcomes - 1)


def observation_rows(test: Any, hypotheses: Sequence[tuple[str, Sequence[Any]]]) -> np.ndarray:
    """(H, K) P(outcome | hypothesis) of an observation test.

    A hypothesis takes the row of its fault id; failing that, of its component id; failing that
    ``default``. A pair takes the first of its faults' rows that is named, in that order.
    """
    table = test.likelihoods
    outcomes = tuple(test.outcomes)
    rows = np.empty((len(hypotheses), len(outcomes)))
    for h, (hyp_id, faults) in enumerate(hypotheses):
        key = "none" if not faults and "none" in table else None
        for fault in faults:
            if key is None and fault.id in table:
                key = fault.id
        for fault in faults:
            if key is None and fault.component in table:
                key = fault.component
        row = table[key or "default"]
        rows[h] = [row[o] for o in outcomes]
    return rows
