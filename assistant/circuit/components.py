"""Circuit models of the component types: each type draws its values and stamps itself.

A *part* wraps one ruleset component. It draws its values for a batch (nominal × tolerance,
one value per variant), changes them for its own fault modes, and stamps itself into the netlist
as the primitives of ``mna.py`` (series EMF-and-resistance branches, a controlled source). The
generic modes (open, high resistance, the shorts) are applied by ``faults.py`` through the keys
every part has: ``open`` (bool: the part is removed) and ``series`` (extra ohms in series).

Models, with their sources:

- battery: EMF behind internal resistance; out of the circuit when it is de-energised.
- wire: copper, R = rho20·(1 + alpha·(T - 20))·L / A with rho20 = 1.7241e-8 ohm·m and alpha =
  0.00393 /K (International Annealed Copper Standard).
- connector, switch, relay contact, ground, fuse, relay coil, resistor: a resistance; contacts
  are removed when open. A fuse with no stated resistance gets 80 mV at its rating (a blade
  fuse's typical cold drop: from memory).
- lamp: tungsten, hot resistance V²/P at its rated voltage while energised; cold resistance
  hot / cold_ratio for an ohmmeter (general lamp engineering references: 1/10 to 1/15).
- motor: running, back-EMF E = V_rated - I_run·R_a in series with R_a (steady-state DC machine
  equation V = E + I·R_a); stalled or de-energised, R_a alone.
- module supply: its voltage behind its internal resistance, in the states it is powered.
- sensor: resistive, a resistance; ratiometric, a load ``supply_resistance`` on the supply and an
  output ``ratio × (V_supply - V_ground)`` behind ``output_resistance``.
- load: the resistance that draws its current at the system voltage.
"""

from __future__ import annotations

from abc import ABC, abstractmethod
from collections.abc import Mapping
from dataclasses import dataclass
from typing import Any, ClassVar, Protocol

import numpy as np

from assistant.errors import CircuitError
from assistant.ruleset.model import Ruleset

COPPER_OHM_M_20C = 1.7241e-8  # International Annealed Copper Standard
COPPER_ALPHA_PER_K = 0.00393  # International Annealed Copper Standard, referred to 20 °C
FUSE_DROP_AT_RATING_V = 0.08  # typical blade fuse cold drop at its rating: from memory
DEFAULT_OFF_STATES = frozenset({"key_off"})  # module supplies are unpowered here unless listed

Values = dict[str, np.ndarray]


class Draw(Protocol):
    """Draws magnitudes for the variants of one hypothesis (midpoints when nominal)."""

    def uniform(self, low: float, high: float) -> np.ndarray: ...
    def log_uniform(self, low: float, high: float) -> np.ndarray: ...
    def choice(self, p: float) -> np.ndarray: ...


class Stamper(Protocol):
    """Where a part stamps itself: the netlist being built."""

    def node(self, part: str, terminal: int) -> str: ...
    def branch(self, owner: str, a: str, b: str, ohms: np.ndarray, emf: np.ndarray, active: np.ndarray,
               *, main: bool = False) -> None: ...
    def vccs(self, owner: str, out_p: str, out_n: str, ctrl_p: str, ctrl_n: str, siemens: np.ndarray,
             active: np.ndarray) -> None: ...


@dataclass(frozen=True, eq=False)
class StampContext:
    """What the operating state and the measurement set for every part of one netlist."""

    state: str
    closes: frozenset[str]  # switches the state closes
    energised: bool  # False for ohmmeter tests: sources out
    contact_closed: Mapping[str, np.ndarray]  # relay contact id -> (B,) closed
    blown: Mapping[str, np.ndarray]  # fuse id -> (B,) blown
    stalled: Mapping[str, np.ndarray]  # motor id -> (B,) not turning
    disconnected: frozenset[str] = frozenset()  # parts taken out for the test
    out_of_holder: frozenset[str] = frozenset()  # parts measured alone, away from their holder
    batch: int = 1

    def zeros(self) -> np.ndarray:
        return np.zeros(self.batch)


class Part(ABC):
    """One component of the ruleset with its circuit model."""

    type_name: ClassVar[str]
    modes: ClassVar[frozenset[str]] = frozenset()  # type-specific fault modes it models

    def __init__(self, spec: Any, ruleset: Ruleset) -> None:
        self.spec = spec
        self.system_voltage = ruleset.system_voltage

    @property
    def id(self) -> str:
        return str(self.spec.id)

    @property
    def nodes(self) -> tuple[str, ...]:
        return tuple(self.spec.nodes)

    def values(self, spread: np.ndarray) -> Values:
        """Its values for variants whose tolerance draw is ``spread`` (uniform in [-1, 1])."""
        factor = 1.0 + float(self.spec.tolerance) * spread
        out = {key: np.asarray(value * (factor if key in self.toleranced else 1.0), dtype=float)
               * np.ones_like(spread) for key, value in self.nominal().items()}
        out["open"] = np.zeros(spread.shape, dtype=bool)
        out["series"] = np.zeros(spread.shape)
        return out

    toleranced: ClassVar[frozenset[str]] = frozenset({"ohms"})

    @abstractmethod
    def nominal(self) -> dict[str, float]:
        """Its nominal values, in SI units."""

    def fault(self, mode: str, values: Values, sl: slice, draw: Draw) -> None:
        """Change ``values[...][sl]`` for a fault mode of its own type; unknown modes raise."""
        raise CircuitError(f"fault mode '{mode}' is not modelled for {self.type_name} '{self.id}'",
                           components=[self.id])

    @abstractmethod
    def stamp(self, values: Values, ctx: StampContext, out: Stamper) -> None:
        """Add its primitives to the netlist."""

    def present(self, values: Values, ctx: StampContext) -> np.ndarray:
        """(B,) whether it is in the circuit at all."""
        if self.id in ctx.disconnected:
            return np.zeros(ctx.batch, dtype=bool)
        return ~values["open"]

    def series(self, values: Values, ctx: StampContext) -> np.ndarray:
        return values["series"]


class _Resistive(Part):
    """A part that is a resistance between its two nodes."""

    def stamp(self, values: Values, ctx: StampContext, out: Stamper) -> None:
        a, b = out.node(self.id, 0), out.node(self.id, 1)
        out.branch(self.id, a, b, values["ohms"] + self.series(values, ctx), ctx.zeros(),
                   self.present(values, ctx) & self.closed(values, ctx), main=True)

    def closed(self, values: Values, ctx: StampContext) -> np.ndarray:
        return np.ones(ctx.batch, dtype=bool)


class BatteryPart(Part):
    type_name = "battery"
    modes = frozenset({"discharged", "failing"})
    FAILING_FACTOR = (5.0, 50.0)  # internal resistance of a failing battery × this: from memory

    def nominal(self) -> dict[str, float]:
        return {"emf": self.spec.nominal_emf, "ohms": self.spec.internal_resistance}

    def values(self, spread: np.ndarray) -> Values:
        """A healthy battery's EMF anywhere in its range, uniform: the lower the charge, the higher
        its internal resistance within tolerance (the one spread draws both)."""
        out = super().values(spread)
        low, high = self.spec.emf
        out["emf"] = high - (high - low) * 0.5 * (1.0 + np.asarray(spread, dtype=float))
        return out

    def fault(self, mode: str, values: Values, sl: slice, draw: Draw) -> None:
        if mode == "discharged":
            values["emf"][sl] = draw.uniform(*self.spec.discharged_emf)
        elif mode == "failing":
            values["ohms"][sl] = values["ohms"][sl] * draw.log_uniform(*self.FAILING_FACTOR)
        else:
            super().fault(mode, values, sl, draw)

    def stamp(self, values: Values, ctx: StampContext, out: Stamper) -> None:
        a, b = out.node(self.id, 0), out.node(self.id, 1)
        on = self.present(values, ctx) & ctx.energised
        out.branch(self.id, a, b, values["ohms"] + values["series"], values["emf"], on, main=True)


class WirePart(_Resistive):
    type_name = "wire"

    def nominal(self) -> dict[str, float]:
        return {"ohms": wire_ohms(self.spec.length, self.spec.section, self.spec.temperature)}


def wire_ohms(length_m: float, section_m2: float, celsius: float = 20.0) -> float:
    """Resistance of a copper conductor (International Annealed Copper Standard)."""
    return COPPER_OHM_M_20C * (1.0 + COPPER_ALPHA_PER_K * (celsius - 20.0)) * length_m / section_m2


class ConnectorPart(_Resistive):
    type_name = "connector"

    def nominal(self) -> dict[str, float]:
        return {"ohms": self.spec.resistance}


class GroundPart(_Resistive):
    type_name = "ground"

    def nominal(self) -> dict[str, float]:
        return {"ohms": self.spec.resistance}


class ResistorPart(_Resistive):
    type_name = "resistor"

    def nominal(self) -> dict[str, float]:
        return {"ohms": self.spec.resistance}


class RelayCoilPart(_Resistive):
    type_name = "relay_coil"

    def nominal(self) -> dict[str, float]:
        return {"ohms": self.spec.resistance}


class FusePart(_Resistive):
    type_name = "fuse"
    modes = frozenset({"blown"})

    def nominal(self) -> dict[str, float]:
        return {"ohms": fuse_ohms(self.spec.rating, self.spec.resistance)}

    @property
    def blow_amps(self) -> float:
        return float(self.spec.rating * self.spec.blow_factor)

    def fault(self, mode: str, values: Values, sl: slice, draw: Draw) -> None:
        if mode == "blown":
            values["open"][sl] = True
        else:
            super().fault(mode, values, sl, draw)

    def closed(self, values: Values, ctx: StampContext) -> np.ndarray:
        blown = ctx.blown.get(self.id)
        return np.ones(ctx.batch, dtype=bool) if blown is None else ~blown


def fuse_ohms(rating_amps: float, stated: float | None = None) -> float:
    """A fuse's cold resistance: as stated, or the typical 80 mV drop at its rating (from memory)."""
    return float(stated) if stated is not None else FUSE_DROP_AT_RATING_V / rating_amps


class _Contact(_Resistive):
    modes = frozenset({"stuck_open", "stuck_closed"})

    def nominal(self) -> dict[str, float]:
        return {"ohms": self.spec.resistance, "force": -1.0}

    def fault(self, mode: str, values: Values, sl: slice, draw: Draw) -> None:
        if mode == "stuck_open":
            values["force"][sl] = 0.0
        elif mode == "stuck_closed":
            values["force"][sl] = 1.0
        else:
            super().fault(mode, values, sl, draw)

    def closed(self, values: Values, ctx: StampContext) -> np.ndarray:
        force = values["force"]
        return np.where(force >= 0, force > 0.5, self.operated(ctx))

    @abstractmethod
    def operated(self, ctx: StampContext) -> np.ndarray:
        """(B,) closed when not stuck."""


class SwitchPart(_Contact):
    type_name = "switch"

    def operated(self, ctx: StampContext) -> np.ndarray:
        return np.full(ctx.batch, self.id in ctx.closes)


class RelayContactPart(_Contact):
    type_name = "relay_contact"

    @property
    def coil(self) -> str:
        return str(self.spec.coil)

    @property
    def normally_closed(self) -> bool:
        return bool(self.spec.normally == "closed")

    def operated(self, ctx: StampContext) -> np.ndarray:
        closed = ctx.contact_closed.get(self.id)
        return np.full(ctx.batch, self.normally_closed) if closed is None else closed


class LampPart(_Resistive):
    type_name = "lamp"
    modes = frozenset({"filament_open"})
    toleranced = frozenset({"hot", "cold"})

    def nominal(self) -> dict[str, float]:
        hot = lamp_hot_ohms(self.spec.rating, self.spec.rated_voltage or self.system_voltage)
        return {"hot": hot, "cold": hot / self.spec.cold_ratio}

    def fault(self, mode: str, values: Values, sl: slice, draw: Draw) -> None:
        if mode == "filament_open":
            values["open"][sl] = True
        else:
            super().fault(mode, values, sl, draw)

    def series(self, values: Values, ctx: StampContext) -> np.ndarray:
        # its high resistance is the holder's contacts: not there when the lamp is out of it
        return ctx.zeros() if self.id in ctx.out_of_holder else values["series"]

    def stamp(self, values: Values, ctx: StampContext, out: Stamper) -> None:
        a, b = out.node(self.id, 0), out.node(self.id, 1)
        ohms = values["hot"] if ctx.energised else values["cold"]
        out.branch(self.id, a, b, ohms + self.series(values, ctx), ctx.zeros(), self.present(values, ctx),
                   main=True)


def lamp_hot_ohms(watts: float, volts: float) -> float:
    """Hot filament resistance at the rated point: R = V² / P."""
    return volts * volts / watts


class MotorPart(Part):
    type_name = "motor"
    modes = frozenset({"seized", "worn"})
    WORN_BACK_EMF = (0.5, 0.85)  # a worn motor runs slower: back-EMF × this (modelling choice)

    def nominal(self) -> dict[str, float]:
        volts = self.spec.rated_voltage or self.system_voltage
        back = volts - self.spec.running_current * self.spec.resistance
        if back <= 0:
            raise CircuitError(f"motor '{self.id}': running current × resistance is above its rated "
                               "voltage, so it could not turn", components=[self.id])
        return {"ohms": self.spec.resistance, "back_emf": back, "seized": 0.0, "wear": 1.0}

    def fault(self, mode: str, values: Values, sl: slice, draw: Draw) -> None:
        if mode == "seized":
            values["seized"][sl] = 1.0
        elif mode == "worn":
            values["wear"][sl] = draw.uniform(*self.WORN_BACK_EMF)
        else:
            super().fault(mode, values, sl, draw)

    def turning(self, values: Values, ctx: StampContext) -> np.ndarray:
        stalled = ctx.stalled.get(self.id, np.zeros(ctx.batch, dtype=bool))
        return ctx.energised & ~stalled & (values["seized"] < 0.5)

    def stamp(self, values: Values, ctx: StampContext, out: Stamper) -> None:
        a, b = out.node(self.id, 0), out.node(self.id, 1)
        emf = np.where(self.turning(values, ctx), values["back_emf"] * values["wear"], 0.0)
        out.branch(self.id, a, b, values["ohms"] + values["series"], emf, self.present(values, ctx), main=True)


class ModuleSupplyPart(Part):
    type_name = "module_supply"
    modes = frozenset({"no_output", "low_output"})
    toleranced = frozenset({"volts"})
    LOW_OUTPUT = (0.5, 0.9)  # a low output is this fraction of its voltage (modelling choice)

    def nominal(self) -> dict[str, float]:
        return {"volts": self.spec.voltage, "ohms": self.spec.internal_resistance}

    def powered_in(self, state: str) -> bool:
        states = self.spec.states
        return state in states if states is not None else state not in DEFAULT_OFF_STATES

    def fault(self, mode: str, values: Values, sl: slice, draw: Draw) -> None:
        if mode == "no_output":
            values["open"][sl] = True
        elif mode == "low_output":
            values["volts"][sl] = values["volts"][sl] * draw.uniform(*self.LOW_OUTPUT)
        else:
            super().fault(mode, values, sl, draw)

    def stamp(self, values: Values, ctx: StampContext, out: Stamper) -> None:
        a, b = out.node(self.id, 0), out.node(self.id, 1)
        on = self.present(values, ctx) & ctx.energised & self.powered_in(ctx.state)
        out.branch(self.id, a, b, values["ohms"] + values["series"], values["volts"], on, main=True)


class SensorPart(Part):
    type_name = "sensor"
    modes = frozenset({"internal_fault"})
    # an internal fault puts a resistive sensor far off its value, a ratiometric one's signal
    # outside the usual 0.5-4.5 V span of a 5 V reference (common practice)
    FAULT_FACTOR_LOW = (0.02, 0.3)
    FAULT_FACTOR_HIGH = (3.0, 50.0)
    FAULT_RATIO_LOW = (0.01, 0.08)
    FAULT_RATIO_HIGH = (0.92, 0.99)

    @property
    def ratiometric(self) -> bool:
        return bool(self.spec.kind == "ratiometric")

    @property
    def toleranced(self) -> frozenset[str]:  # type: ignore[override]
        return frozenset({"ratio"}) if self.ratiometric else frozenset({"ohms"})

    def nominal(self) -> dict[str, float]:
        if self.ratiometric:
            return {"ratio": self.spec.ratio, "ohms": self.spec.output_resistance,
                    "supply_ohms": self.spec.supply_resistance}
        return {"ohms": self.spec.resistance}

    def fault(self, mode: str, values: Values, sl: slice, draw: Draw) -> None:
        if mode != "internal_fault":
            super().fault(mode, values, sl, draw)
            return
        high = draw.choice(0.5)
        if self.ratiometric:
            stuck = np.where(high, draw.uniform(*self.FAULT_RATIO_HIGH), draw.uniform(*self.FAULT_RATIO_LOW))
            values["ratio"][sl] = np.minimum(stuck, 0.999)
        else:
            factor = np.where(high, draw.log_uniform(*self.FAULT_FACTOR_HIGH),
                              draw.log_uniform(*self.FAULT_FACTOR_LOW))
            values["ohms"][sl] = values["ohms"][sl] * factor

    def stamp(self, values: Values, ctx: StampContext, out: Stamper) -> None:
        on = self.present(values, ctx)
        if not self.ratiometric:
            out.branch(self.id, out.node(self.id, 0), out.node(self.id, 1), values["ohms"] + values["series"],
                       ctx.zeros(), on, main=True)
            return
        supply, signal, ground = (out.node(self.id, i) for i in range(3))
        out.branch(self.id, supply, ground, values["supply_ohms"], ctx.zeros(), on)
        r_out = values["ohms"] + values["series"]
        out.branch(self.id, signal, ground, r_out, ctx.zeros(), on, main=True)
        # unpowered (ohmmeter tests) it is passive: the output source is off
        out.vccs(self.id, signal, ground, supply, ground, values["ratio"] / r_out, on & ctx.energised)


class LoadPart(_Resistive):
    type_name = "load"
    modes = frozenset({"stays_awake"})
    AWAKE_FACTOR = 10.0  # a module that will not sleep draws this × its sleep current, if unstated

    def nominal(self) -> dict[str, float]:
        return {"ohms": self.system_voltage / self.spec.current}

    def fault(self, mode: str, values: Values, sl: slice, draw: Draw) -> None:
        if mode == "stays_awake":
            awake = self.spec.awake_current or self.AWAKE_FACTOR * self.spec.current
            values["ohms"][sl] = self.system_voltage / awake
        else:
            super().fault(mode, values, sl, draw)


PART_TYPES: dict[str, type[Part]] = {
    cls.type_name: cls
    for cls in (BatteryPart, WirePart, ConnectorPart, FusePart, SwitchPart, RelayContactPart, RelayCoilPart,
                LampPart, MotorPart, ModuleSupplyPart, ResistorPart, SensorPart, GroundPart, LoadPart)
}


def part_for(spec: Any, ruleset: Ruleset) -> Part:
    """The circuit model of one component; a type with no model raises CircuitError."""
    cls = PART_TYPES.get(getattr(spec, "type", None))  # type: ignore[arg-type]
    if cls is None:
        raise CircuitError(f"component '{getattr(spec, 'id', '?')}' has type '{getattr(spec, 'type', '?')}', "
                           "which has no circuit model", components=[str(getattr(spec, "id", "?"))])
    return cls(spec, ruleset)

