"""Default fault modes of each component type, and the fault list a ruleset resolves to.

Weights are relative prior weights within one circuit; the numbers below are starting
points of common practice (corroded grounds and connectors and blown lamps are frequent,
a shorted battery cable rare), meant to be tuned from a fleet's repair history.
A ruleset overrides any entry per component; weight 0 switches a mode off.
"""

from __future__ import annotations

from dataclasses import dataclass

from assistant.ruleset.model import Ruleset

# Default magnitude ranges in ohms (log-uniform draws): issue-agreed defaults.
HIGH_RESISTANCE_OHMS = (0.5, 50.0)
SHORT_OHMS = (0.01, 0.5)


@dataclass(frozen=True)
class ModeDefault:
    """A fault mode's default weight, range and repair for one component type."""

    weight: float
    repair: str
    repair_minutes: float
    range_ohms: tuple[float, float] | None = None


def _hr(weight: float, repair: str, minutes: float = 20.0) -> ModeDefault:
    return ModeDefault(weight, repair, minutes, HIGH_RESISTANCE_OHMS)


def _short(weight: float, repair: str, minutes: float = 45.0) -> ModeDefault:
    return ModeDefault(weight, repair, minutes, SHORT_OHMS)


DEFAULT_MODES: dict[str, dict[str, ModeDefault]] = {
    "battery": {
        "discharged": ModeDefault(2.0, "Recharge the battery and find why it went flat", 30.0),
        "failing": ModeDefault(1.0, "Replace the battery", 20.0),
    },
    "wire": {
        "open": ModeDefault(0.6, "Repair the broken wire (splice or new section)", 45.0),
        "short_to_ground": _short(0.4, "Repair the chafed insulation where the wire touches ground"),
        "short_to_power": _short(0.1, "Separate the wire from the powered wire it touches"),
        "high_resistance": _hr(0.3, "Repair the corroded or partly broken wire section", 40.0),
    },
    "connector": {
        "open": ModeDefault(0.6, "Repair the pushed-out or broken terminal", 25.0),
        "high_resistance": _hr(1.5, "Clean or replace the corroded terminals", 20.0),
    },
    "fuse": {
        "blown": ModeDefault(1.5, "Replace the fuse after finding what blew it", 5.0),
        "high_resistance": _hr(0.2, "Replace the fuse and clean its holder", 5.0),
    },
    "switch": {
        "stuck_open": ModeDefault(1.0, "Replace or adjust the switch", 20.0),
        "stuck_closed": ModeDefault(0.4, "Replace or adjust the switch", 20.0),
        "high_resistance": _hr(0.6, "Replace the switch (burnt contacts)", 20.0),
    },
    "relay_contact": {
        "stuck_open": ModeDefault(0.6, "Replace the relay", 5.0),
        "stuck_closed": ModeDefault(0.4, "Replace the relay", 5.0),
        "high_resistance": _hr(0.8, "Replace the relay (burnt contacts)", 5.0),
    },
    "relay_coil": {
        "open": ModeDefault(0.5, "Replace the relay", 5.0),
    },
    "lamp": {
        "filament_open": ModeDefault(4.0, "Replace the lamp", 5.0),
        "high_resistance": _hr(0.8, "Clean or replace the lamp holder contacts", 15.0),
    },
    "motor": {
        "open": ModeDefault(0.8, "Replace the motor (open armature or brushes)", 45.0),
        "seized": ModeDefault(0.6, "Free or replace the seized motor", 45.0),
        "worn": ModeDefault(1.0, "Replace the worn motor", 45.0),
    },
    "module_supply": {
        "no_output": ModeDefault(0.3, "Check the module's own feeds; replace the module", 60.0),
        "low_output": ModeDefault(0.3, "Check the module's own feeds; replace the module", 60.0),
    },
    "resistor": {
        "open": ModeDefault(0.6, "Replace the resistor or resistor pack", 20.0),
        "high_resistance": _hr(0.3, "Replace the resistor or resistor pack", 20.0),
    },
    "sensor": {
        "internal_fault": ModeDefault(1.0, "Replace the sensor", 20.0),
        "open": ModeDefault(0.5, "Replace the sensor", 20.0),
    },
    "ground": {
        "open": ModeDefault(0.5, "Refit the loose or broken ground", 20.0),
        "high_resistance": _hr(2.0, "Clean and refit the corroded ground point", 20.0),
    },
    "load": {
        "stays_awake": ModeDefault(1.0, "Find why the module stays awake; repair or replace it", 60.0),
        "open": ModeDefault(0.3, "Repair the load's feed", 30.0),
    },
}


@dataclass(frozen=True)
class Fault:
    """One fault hypothesis of a ruleset, defaults applied: ``<component>.<mode>``."""

    id: str
    component: str
    component_type: str
    mode: str
    weight: float
    range_ohms: tuple[float, float] | None
    at: str | None
    repair: str
    repair_minutes: float
    description: str | None = None
    to: str | None = None  # short_to_power only: the node shorted to (None: the ruleset's power node)


def fault_list(ruleset: Ruleset) -> tuple[Fault, ...]:
    """Every fault mode of the ruleset with a positive weight, defaults filled in, in file order."""
    faults: list[Fault] = []
    for comp in ruleset.components:
        modes = dict(DEFAULT_MODES.get(comp.type, {}))
        for mode in comp.faults:
            if mode not in modes:
                # a mode the type has no default for: the author must give its weight anyway
                modes[mode] = ModeDefault(comp.faults[mode].weight, "Repair or replace the part", 30.0,
                                          HIGH_RESISTANCE_OHMS if mode == "high_resistance" else
                                          SHORT_OHMS if mode.startswith("short_") else None)
        for name, default in modes.items():
            spec = comp.faults.get(name)  # type: ignore[call-overload]
            weight = spec.weight if spec is not None else default.weight
            if weight <= 0:
                continue
            repair = (spec.repair if spec is not None and spec.repair else None) or comp.repair
            faults.append(
                Fault(
                    id=f"{comp.id}.{name}",
                    component=comp.id,
                    component_type=comp.type,
                    mode=name,
                    weight=weight,
                    range_ohms=(spec.range if spec is not None and spec.range else None) or default.range_ohms,
                    at=spec.at if spec is not None else None,
                    repair=repair.action if repair else default.repair,
                    repair_minutes=repair.minutes if repair else default.repair_minutes,
                    description=spec.description if spec is not None else None,
                    to=spec.to if spec is not None else None,
                )
            )
    return tuple(faults)
