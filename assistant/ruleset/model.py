"""The ruleset format, version 1: frozen pydantic models of one circuit and how to test it.

A ruleset is data only. It names the circuit (nodes that are test points, components between
them), the operating states that set its contacts, the fault modes with their prior weights,
the tests a meter or the eye can make, the complaints a technician starts from, the shop's
decision rules and the author's regression cases. Nothing in it is ever executed.

Quantities are stored as SI floats (volts, ohms, amperes, watts, metres, square metres),
except test costs and repair times, in minutes, and temperatures, in degrees Celsius. See
``quantities.py`` for the accepted spellings. The models validate shape and value ranges;
cross-references (unknown nodes, unknown faults) are checked by ``lint.py``.

Every component type brings default fault modes and weights (``defaults.py``), so an author
writes only what differs.
"""

from __future__ import annotations

from collections.abc import Sequence
from itertools import product
from typing import Annotated, Any, Literal, Union

from pydantic import BaseModel, ConfigDict, Field, ValidationInfo, WithJsonSchema, field_validator, model_validator

from assistant.errors import QuantityError
from assistant.ruleset.quantities import (
    Amperes,
    Celsius,
    Fraction,
    Metres,
    Minutes,
    VOLTAGE,
    Ohms,
    SquareMetres,
    Volts,
    Watts,
    parse_quantity,
)

FORMAT_VERSION = 1

Identifier = Annotated[
    str,
    Field(
        pattern=r"^[A-Za-z][A-Za-z0-9_+\-]*$",
        max_length=64,
        description="a name: letters, digits, '_', '-', '+', starting with a letter",
    ),
]
# A fault is named "<component>.<mode>"; "none" is the no-fault hypothesis.
FaultId = Annotated[str, Field(pattern=r"^(none|[A-Za-z][A-Za-z0-9_+\-]*\.[a-z][a-z0-9_]*)$")]

FaultMode = Literal[
    "open",
    "short_to_ground",
    "short_to_power",
    "high_resistance",
    "blown",
    "filament_open",
    "stuck_open",
    "stuck_closed",
    "seized",
    "worn",
    "discharged",
    "failing",
    "no_output",
    "low_output",
    "internal_fault",
    "stays_awake",
]


class Frozen(BaseModel):
    """Base of every ruleset model: immutable, unknown keys rejected.

    Types are checked in pydantic's lax mode (a YAML list fills a tuple); the YAML 1.2 parser
    already keeps ``no`` a text and ``010`` a decimal number, so no value changes kind unseen.
    """

    model_config = ConfigDict(frozen=True, extra="forbid", strict=False)


def _text_version(value: Any) -> Any:
    # Authors write `version: 1.2` as often as `version: "1.2"`; both mean the text.
    if isinstance(value, (int, float)) and not isinstance(value, bool):
        return str(value)
    return value


# --------------------------------------------------------------------------- metadata


class Vehicle(Frozen):
    """A vehicle (of the shop's own fleet) the ruleset is drawn for."""

    model: str = Field(description="the fleet's name for the model")
    years: str | None = Field(default=None, description="model years, e.g. '2019-2024'")
    variant: str | None = None
    notes: str | None = None


class Repair(Frozen):
    """What fixing a fault means: the action and the minutes it takes."""

    action: str
    minutes: Minutes = Field(default=15.0, gt=0)


class Range(Frozen):
    """A magnitude range for a fault (e.g. the resistance of a corroded joint)."""

    low: float = Field(gt=0)
    high: float = Field(gt=0)

    @model_validator(mode="after")
    def _ordered(self) -> Range:
        if self.high < self.low:
            raise ValueError("high must not be below low")
        return self


class FaultSpec(Frozen):
    """One fault mode of a component as the author states it; omitted parts take defaults."""

    weight: float = Field(ge=0, description="prior weight; 0 turns the mode off")
    range: tuple[Ohms, Ohms] | None = Field(
        default=None,
        description="for high_resistance and shorts: [low, high] resistance, drawn log-uniform",
    )
    at: Identifier | None = Field(
        default=None, description="for shorts: the node that is shorted (default: the component's last node)"
    )
    to: Identifier | None = Field(
        default=None,
        description="for short_to_power: the node the short goes to (default: the ruleset's power node), "
        "e.g. a module's 5 V reference for a signal wire shorted to it",
    )
    repair: Repair | None = None
    description: str | None = None

    @field_validator("range")
    @classmethod
    def _range_ordered(cls, value: tuple[float, float] | None) -> tuple[float, float] | None:
        if value is not None and not (0 < value[0] <= value[1]):
            raise ValueError("range must be [low, high] with 0 < low <= high")
        return value


def _weight_shorthand(value: Any) -> Any:
    # `open: 2` means `open: {weight: 2}`.
    if isinstance(value, dict):
        return {k: ({"weight": v} if isinstance(v, (int, float)) and not isinstance(v, bool) else v)
                for k, v in value.items()}
    return value


FaultTable = Annotated[dict[FaultMode, FaultSpec], Field(default_factory=dict)]


class ComponentBase(Frozen):
    """Fields every component has."""

    id: Identifier
    nodes: tuple[Identifier, ...] = Field(min_length=2, max_length=3)
    label: str | None = Field(default=None, description="what the technician calls it")
    location: str | None = None
    tolerance: Fraction = Field(default=0.05, ge=0, le=1, description="relative tolerance of its value")
    faults: FaultTable
    repair: Repair | None = Field(default=None, description="default repair for all its faults")

    @field_validator("faults", mode="before")
    @classmethod
    def _faults_shorthand(cls, value: Any) -> Any:
        return _weight_shorthand(value)

    @field_validator("nodes")
    @classmethod
    def _two_nodes(cls, value: tuple[str, ...]) -> tuple[str, ...]:
        if len(value) != 2:
            raise ValueError("this component joins exactly two nodes: [from, to]")
        if value[0] == value[1]:
            raise ValueError("a component cannot join a node to itself")
        return value


class Battery(ComponentBase):
    """A battery: EMF behind internal resistance. nodes: [positive, negative]."""

    type: Literal["battery"]
    emf: Annotated[tuple[Volts, Volts], WithJsonSchema({
        "anyOf": [{"type": "number"}, {"type": "string"},
                  {"type": "array", "items": {"anyOf": [{"type": "number"}, {"type": "string"}]},
                   "minItems": 2, "maxItems": 2}],
        "description": "EMF at rest: one value, or the range [low, high] a healthy battery in service "
                       "may be at (its state of charge is not known before the test), e.g. "
                       "[12.45 V, 12.65 V] for 75-100 %; one value is kept as a range of one",
    })]
    internal_resistance: Ohms = Field(default=0.01, gt=0)
    # 0 to 50 % state of charge: 11.89 V to 12.24 V open-circuit in the lead-acid table (FACTS.md [S])
    discharged_emf: tuple[Volts, Volts] = Field(
        default=(11.9, 12.24), description="EMF range of a discharged battery (0-50 % state of charge)"
    )

    @field_validator("emf", mode="before")
    @classmethod
    def _emf_one_value(cls, value: Any) -> Any:
        # one value is a range of one: (v, v); a list goes on to the range's own checks
        if isinstance(value, (list, tuple)):
            return value
        try:
            volts = parse_quantity(value, VOLTAGE)
        except QuantityError as exc:
            raise ValueError(str(exc)) from exc
        return (volts, volts)

    @field_validator("emf")
    @classmethod
    def _emf_positive(cls, value: tuple[float, float]) -> tuple[float, float]:
        if not 0 < value[0] <= value[1]:
            raise ValueError("emf must be above 0 V; a range is [low, high] with low <= high")
        return value

    @property
    def nominal_emf(self) -> float:
        """The EMF of the nominal (noise-free) circuit: the middle of the range."""
        return 0.5 * (self.emf[0] + self.emf[1])


class Wire(ComponentBase):
    """A copper wire run. Resistance from length, cross-section and temperature."""

    type: Literal["wire"]
    length: Metres = Field(gt=0)
    section: SquareMetres = Field(gt=0, description="cross-section: '1.5 mm2' or '18 AWG'")
    temperature: Celsius = Field(default=20.0, ge=-60, le=200)
    material: Literal["copper"] = "copper"


class Connector(ComponentBase):
    """A connector's mated contact pair."""

    type: Literal["connector"]
    resistance: Ohms = Field(default=0.002, ge=0)
    pin: str | None = None


class Fuse(ComponentBase):
    """A fuse. It blows (opens) when its current exceeds rating × blow_factor."""

    type: Literal["fuse"]
    rating: Amperes = Field(gt=0)
    resistance: Ohms | None = Field(default=None, ge=0, description="cold resistance; default from the rating")
    blow_factor: float = Field(default=1.35, gt=1)


class Switch(ComponentBase):
    """A switch contact, closed in the operating states that list it in ``closes``."""

    type: Literal["switch"]
    resistance: Ohms = Field(default=0.005, ge=0, description="resistance when closed")


class RelayContact(ComponentBase):
    """A relay's contact, closed while its coil carries at least the pull-in current."""

    type: Literal["relay_contact"]
    coil: Identifier = Field(description="id of the relay_coil that operates it")
    normally: Literal["open", "closed"] = "open"
    resistance: Ohms = Field(default=0.01, ge=0)


class RelayCoil(ComponentBase):
    """A relay coil."""

    type: Literal["relay_coil"]
    resistance: Ohms = Field(gt=0)
    pull_in: Amperes = Field(default=0.05, gt=0, description="current that closes its contacts")


class Lamp(ComponentBase):
    """A tungsten filament lamp; hot resistance from its rating, cold about a twelfth of it."""

    type: Literal["lamp"]
    rating: Watts = Field(gt=0)
    rated_voltage: Volts | None = Field(default=None, gt=0, description="default: the system voltage")
    cold_ratio: float = Field(default=12.0, ge=5, le=20, description="hot / cold resistance")
    lamp_category: str | None = Field(default=None, description="e.g. P21W (for the parts list)")


class Motor(ComponentBase):
    """A permanent-magnet DC motor: armature resistance and back-EMF at running speed."""

    type: Literal["motor"]
    resistance: Ohms = Field(gt=0, description="armature resistance (sets the stall current)")
    running_current: Amperes = Field(gt=0, description="current when running normally at rated voltage")
    rated_voltage: Volts | None = Field(default=None, gt=0)


class ModuleSupply(ComponentBase):
    """A module output (supply feed or 5 V reference): a voltage behind an internal resistance.

    nodes: [output, return]
    """

    type: Literal["module_supply"]
    voltage: Volts = Field(gt=0)
    internal_resistance: Ohms = Field(default=1.0, gt=0)
    states: tuple[Identifier, ...] | None = Field(
        default=None, description="operating states in which it is powered (default: all but key_off)"
    )


class Resistor(ComponentBase):
    """A resistor: pull-up, pull-down, speed-resistor stage, a load's equivalent."""

    type: Literal["resistor"]
    resistance: Ohms = Field(gt=0)
    role: Literal["pull_up", "pull_down", "load", "stage", "other"] = "other"


class Sensor(ComponentBase):
    """A sensor. Resistive: nodes [a, b], a resistance. Ratiometric: nodes [supply, signal, ground],
    the signal is ``ratio`` × the supply voltage behind ``output_resistance``."""

    type: Literal["sensor"]
    kind: Literal["resistive", "ratiometric"]
    resistance: Ohms | None = Field(default=None, gt=0, description="resistive: its resistance")
    ratio: float | None = Field(default=None, gt=0, lt=1, description="ratiometric: signal / supply")
    output_resistance: Ohms = Field(default=100.0, gt=0)
    supply_resistance: Ohms = Field(default=5000.0, gt=0, description="ratiometric: load on the supply")

    @field_validator("nodes")
    @classmethod
    def _two_nodes(cls, value: tuple[str, ...]) -> tuple[str, ...]:
        if len(set(value)) != len(value):
            raise ValueError("a sensor's nodes must differ")
        return value

    @model_validator(mode="after")
    def _kind_fields(self) -> Sensor:
        if self.kind == "resistive":
            if len(self.nodes) != 2 or self.resistance is None:
                raise ValueError("a resistive sensor has nodes [a, b] and a resistance")
        elif len(self.nodes) != 3 or self.ratio is None:
            raise ValueError("a ratiometric sensor has nodes [supply, signal, ground] and a ratio")
        return self


class Ground(ComponentBase):
    """A ground connection (eyelet, strap, splice) to the chassis reference."""

    type: Literal["ground"]
    resistance: Ohms = Field(default=0.002, ge=0)


class Load(ComponentBase):
    """A load drawing a fixed current where modelled as a resistance (module sleep draw, a lamp
    kept lit): resistance from the current it draws at the system voltage."""

    type: Literal["load"]
    current: Amperes = Field(gt=0, description="current it draws at the system voltage")
    awake_current: Amperes | None = Field(default=None, gt=0, description="draw when it will not sleep")


Component = Annotated[
    Union[
        Battery, Wire, Connector, Fuse, Switch, RelayContact, RelayCoil, Lamp, Motor,
        ModuleSupply, Resistor, Sensor, Ground, Load,
    ],
    Field(discriminator="type"),
]

COMPONENT_TYPES: tuple[str, ...] = (
    "battery", "wire", "connector", "fuse", "switch", "relay_contact", "relay_coil", "lamp",
    "motor", "module_supply", "resistor", "sensor", "ground", "load",
)


# --------------------------------------------------------------------------- nodes and states


class Node(Frozen):
    """A test point: a place a probe can touch, and how to find it."""

    label: str | None = None
    connector: str | None = None
    pin: str | None = None
    wire: str | None = Field(default=None, description="wire colour or code")
    location: str | None = None
    probe: str | None = Field(default=None, description="how to reach it (back-probe, pierce, terminal)")


class State(Frozen):
    """An operating state (key off, pedal pressed, cranking): which switches it closes."""

    label: str
    closes: tuple[Identifier, ...] = ()
    instructions: str | None = Field(default=None, description="how to set it, shown with each test")
    cautions: tuple[str, ...] = ()


class Preparation(Frozen):
    """Access work several tests share (a trim panel off, a relay on a breakout lead, the cranking
    set-up): made once in a diagnosis, then every test that needs it costs only its own minutes."""

    title: str
    cost: Minutes = Field(gt=0, description="minutes to make it, once per diagnosis")
    instructions: str | None = None
    cautions: tuple[str, ...] = ()


# --------------------------------------------------------------------------- tests


class TestBase(Frozen):
    """Fields every test has."""

    id: Identifier
    title: str | None = None
    cost: Minutes = Field(default=2.0, gt=0, description="minutes to make the test once its preparations are "
                          "made (access included where it names none)")
    state: Identifier | None = Field(default=None, description="operating state it needs")
    access: str | None = Field(default=None, description="how to get at the test points")
    prepare: tuple[Identifier, ...] = Field(
        default=(), description="preparations it needs (ids of the ruleset's 'preparations'), made once and shared"
    )
    instructions: str | None = None
    cautions: tuple[str, ...] = ()
    healthy: tuple[float, float] | None = Field(
        default=None, description="override of the healthy range shown (SI units)"
    )


class VoltageTest(TestBase):
    """DC voltage at a node against a reference point (default: the ruleset's ground)."""

    kind: Literal["voltage"]
    at: Identifier
    reference: Identifier | None = None
    instrument: Literal["meter", "scan_tool"] = Field(
        default="meter", description="meter: the multimeter's leads on the two points; scan_tool: the "
        "voltage a module reports in its live data for its own input (no leads, no meter loading)"
    )


class DropTest(TestBase):
    """Voltage drop between two nodes while the circuit carries its load."""

    kind: Literal["drop"]
    between: tuple[Identifier, Identifier]


class ResistanceTest(TestBase):
    """Resistance between two nodes with the circuit de-energised: sources out, ``isolate`` removed."""

    kind: Literal["resistance"]
    between: tuple[Identifier, Identifier]
    isolate: tuple[Identifier, ...] = Field(
        default=(), description="components disconnected for the test (fuse pulled, connector apart)"
    )
    only: tuple[Identifier, ...] = Field(
        default=(), description="measure these components alone, out of the circuit (a pulled fuse, a lamp "
        "out of its holder); the rest is disconnected"
    )


class CurrentTest(TestBase):
    """Current in series with a component (the meter breaks the circuit at its first node)."""

    kind: Literal["current"]
    component: Identifier
    jack: Literal["auto", "10A", "mA", "clamp"] = "auto"
    isolate: tuple[Identifier, ...] = Field(
        default=(), description="components taken out of the circuit while the current is read (a fuse "
        "pulled while the total key-off draw is watched)"
    )


class FuseDropTest(TestBase):
    """Millivolt drop across a fuse in place, read as current through the fuse's resistance."""

    kind: Literal["fuse_drop"]
    fuse: Identifier


Lit = Literal["lit", "dark", "dim", "full", "pulled_in", "released", "any"]
# the component types a look can judge by their current: lamps and loads have a rated current to
# be lit against, a relay coil its pull-in current (not a motor: a seized one draws more than a
# running one and does not turn)
SEEN_PART_TYPES = ("lamp", "load", "relay_coil")
LAMP_WORDS = ("lit", "dark", "dim", "full")  # what a lamp or load shows
RELAY_WORDS = ("pulled_in", "released")  # what a relay coil does (heard or felt as a click)


class Seen(Frozen):
    """What an observation's answer follows in the circuit: how much current ``parts`` carry.

    ``parts`` are lamps or loads (:data:`SEEN_PART_TYPES`). A part counts as lit when it passes
    at least ``lit_above`` of its rated current (a lamp's watts over its rated voltage, a load's
    current) in the test's state; dark below. With ``full_above``, a lit part is full at or
    above that share and dim below it; with ``side_by_side`` that share is of the current of the
    brightest of the parts, not of the rated current (two lamps compared on a wall: one is
    dimmer than the other, whatever the battery gives both). ``answers`` gives, for every answer
    of the observation, the pattern of the parts it stands for, one of ``lit``, ``dark``,
    ``dim``, ``full`` or ``any`` per part in the order of ``parts`` (or a list of such patterns,
    any of which gives that answer); the first answer, in the order written, whose pattern fits
    is the one the circuit gives.

    A relay coil among ``parts`` is ``pulled_in`` when it carries at least its ``pull_in``
    current in the test's state, ``released`` below (a click heard or felt at the relay). With
    ``since``, a state, it counts as ``pulled_in`` only where it was released in that state: the
    click of a relay pulling in as the controls go from ``since`` to the test's state (a relay
    already held in makes no sound).
    """

    parts: tuple[Identifier, ...] = Field(min_length=1, max_length=8)
    lit_above: float = Field(default=0.25, gt=0, lt=1, description="share of the rated current")
    full_above: float | None = Field(default=None, gt=0, le=1.5,
                                     description="share of the rated current from which a lit part is full, not dim")
    side_by_side: bool = Field(default=False, description="full_above is a share of the brightest part's current")
    since: Identifier | None = Field(default=None, description="a relay coil is pulled_in only where it was "
                                     "released in this state (it clicks as the controls go from it to the "
                                     "test's state)")
    answers: dict[Identifier, tuple[tuple[Lit, ...], ...]]

    @field_validator("answers", mode="before")
    @classmethod
    def _one_pattern(cls, value: Any) -> Any:
        """``both: [lit, lit]`` is the one pattern ``[[lit, lit]]``."""
        if isinstance(value, dict):
            return {k: [v] if isinstance(v, (list, tuple)) and v and all(isinstance(x, str) for x in v) else v
                    for k, v in value.items()}
        return value

    @model_validator(mode="after")
    def _patterns(self) -> Seen:
        if len(set(self.parts)) != len(self.parts):
            raise ValueError("parts must not repeat")
        if self.full_above is not None and self.full_above <= self.lit_above and not self.side_by_side:
            raise ValueError("full_above must be above lit_above")
        if self.side_by_side and (self.full_above is None or self.full_above >= 1 or len(self.parts) < 2):
            raise ValueError("side_by_side compares two parts or more, with full_above a share "
                             "under 1 of the brightest")
        for answer, patterns in self.answers.items():
            if not patterns or any(len(p) != len(self.parts) for p in patterns):
                raise ValueError(f"answer '{answer}' needs one of lit, dark, dim, full, any (a lamp or load) "
                                 f"or pulled_in, released, any (a relay coil) for each of the "
                                 f"{len(self.parts)} parts {list(self.parts)}")
            if self.full_above is None and any(x in ("dim", "full") for p in patterns for x in p):
                raise ValueError(f"answer '{answer}' tells dim from full: give full_above, the share of the "
                                 "rated current from which a lit part is full")
        for j, part in enumerate(self.parts):
            words = {p[j] for patterns in self.answers.values() for p in patterns} - {"any"}
            if words & set(LAMP_WORDS) and words & set(RELAY_WORDS):
                raise ValueError(f"part '{part}' is given both a lamp's words (lit, dark, dim, full) and a "
                                 "relay's (pulled_in, released); a part is one or the other")
        return self

    def relay_parts(self) -> tuple[int, ...]:
        """The positions of the parts the patterns speak of as relays (pulled_in, released)."""
        return tuple(j for j in range(len(self.parts))
                     if any(p[j] in RELAY_WORDS for patterns in self.answers.values() for p in patterns))

    @property
    def levels(self) -> tuple[str, ...]:
        """What a part can show: dark or lit; dark, dim or full with ``full_above``."""
        return ("dark", "lit") if self.full_above is None else ("dark", "dim", "full")

    def answer_of(self, shown: Sequence[str]) -> str | None:
        """The first answer with a pattern that fits what the parts show (each a level of
        :attr:`levels`); None if none fits."""
        def fits(p: str, level: str) -> bool:
            if p == "pulled_in":  # a relay's words for its two levels
                p = "lit"
            elif p == "released":
                p = "dark"
            return p == "any" or p == level or (p == "lit" and level in ("dim", "full"))

        for answer, patterns in self.answers.items():
            for pattern in patterns:
                if all(fits(p, level) for p, level in zip(pattern, shown, strict=True)):
                    return answer
        return None


DEFAULT_MISJUDGED = 0.02  # one glance in fifty answers otherwise than the circuit: a judgement, not a measured figure


class ObservationTest(TestBase):
    """A question answered by looking or trying ("fuse visibly blown?").

    Either ``likelihoods`` maps a fault id (or a component id for all its modes, or
    ``default``) to P(outcome) for each outcome, each row summing to 1; or ``seen`` says which
    parts' current the answer follows, so that every answer comes from the circuit (each
    simulated vehicle's own), and ``misjudged`` is the chance that a technician gives another
    answer than the one the circuit shows.
    """

    kind: Literal["observation"]
    question: str
    outcomes: tuple[Identifier, ...] = ("yes", "no")
    likelihoods: dict[str, dict[str, float]] | None = None
    seen: Seen | None = None
    misjudged: float | None = Field(default=None, ge=0, lt=0.5,
                                    description="with seen: the chance of another answer than the circuit's "
                                                f"(default {DEFAULT_MISJUDGED})")

    @field_validator("misjudged")
    @classmethod
    def _only_with_seen(cls, value: float | None, info: ValidationInfo) -> float | None:
        # likelihood rows already hold the chance of a wrong answer: a misjudged beside them
        # would be read by nothing
        if value is not None and info.data.get("seen") is None and info.data.get("likelihoods") is not None:
            raise ValueError("misjudged applies to a look written with seen; with likelihoods, "
                             "put the chance of a wrong answer in the rows")
        return value

    @property
    def misjudged_chance(self) -> float:
        """The chance of another answer than the circuit's: ``misjudged``, else the default."""
        return DEFAULT_MISJUDGED if self.misjudged is None else self.misjudged

    @model_validator(mode="after")
    def _rows(self) -> ObservationTest:
        if (self.likelihoods is None) == (self.seen is None):
            raise ValueError("give either likelihoods or seen (what the answer follows in the circuit), not both")
        if self.seen is not None:
            if set(self.seen.answers) != set(self.outcomes):
                raise ValueError(f"seen.answers must give a pattern for every outcome {list(self.outcomes)}")
            if len(self.outcomes) < 2:
                raise ValueError("an observation needs at least two outcomes")
            missing = [combo for combo in product(self.seen.levels, repeat=len(self.seen.parts))
                       if self.seen.answer_of(combo) is None]
            if missing:
                shown = ", ".join(missing[0])
                raise ValueError(f"seen.answers give no answer when the parts are ({shown}); "
                                 "add that pattern, or 'any' where a part does not matter")
            return self
        assert self.likelihoods is not None
        if "default" not in self.likelihoods:
            raise ValueError("likelihoods need a 'default' row for the faults not named")
        for key, row in self.likelihoods.items():
            if set(row) != set(self.outcomes):
                raise ValueError(f"row '{key}' must give every outcome {list(self.outcomes)}")
            if any(p < 0 or p > 1 for p in row.values()) or abs(sum(row.values()) - 1) > 1e-6:
                raise ValueError(f"row '{key}' must be probabilities that sum to 1")
        return self


Test = Annotated[
    Union[VoltageTest, DropTest, ResistanceTest, CurrentTest, FuseDropTest, ObservationTest],
    Field(discriminator="kind"),
]


# --------------------------------------------------------------------------- complaints, rules, cases


class Complaint(Frozen):
    """A starting symptom. Faults it does not lead to have their weight scaled by ``others``."""

    id: Identifier
    text: str
    suspects: tuple[str, ...] = Field(
        default=(), description="fault ids or component ids it points to; empty: all"
    )
    others: float = Field(default=0.1, ge=0, le=1)


Operator = Literal["eq", "ne", "lt", "le", "gt", "ge", "in", "contains"]


class Condition(Frozen):
    """One test on a fact: ``complaint``, ``fault_code``, ``vehicle.<attr>``, ``reading.<test>``."""

    fact: str = Field(pattern=r"^(complaint|fault_code|vehicle\.[a-z_]+|reading\.[A-Za-z][A-Za-z0-9_+\-]*)$")
    op: Operator = "eq"
    value: str | int | float | bool | tuple[str | int | float, ...]


class Action(Frozen):
    """What a rule does. Exactly one of its fields is set."""

    scale: tuple[str, float] | None = Field(default=None, description="[fault id, factor]")
    rule_out: str | None = Field(default=None, description="fault id")
    require_first: Identifier | None = Field(default=None, description="test id")
    caution: str | None = None
    recommend: Identifier | None = Field(default=None, description="test id")

    @model_validator(mode="after")
    def _one(self) -> Action:
        set_fields = [k for k, v in self.__dict__.items() if v is not None]
        if len(set_fields) != 1:
            raise ValueError("an action sets exactly one of: scale, rule_out, require_first, caution, recommend")
        return self


class Rule(Frozen):
    """A shop rule: when every condition holds, do every action."""

    id: Identifier
    when: tuple[Condition, ...] = Field(min_length=1)
    then: tuple[Action, ...] = Field(min_length=1)
    why: str | None = None


class Case(Frozen):
    """An author's regression case: given these answers, expect this diagnosis."""

    id: Identifier
    complaint: Identifier | None = None
    vehicle: dict[str, str | int | float] = Field(default_factory=dict)
    fault_codes: tuple[str, ...] = ()
    readings: dict[Identifier, str | int | float]
    expect: FaultId
    max_tests: int | None = Field(default=None, gt=0)
    order: tuple[Identifier, ...] | None = Field(default=None, description="expected test order (prefix)")


# --------------------------------------------------------------------------- the ruleset


class Ruleset(Frozen):
    """One circuit of one family of vehicles, with its faults, tests, states, rules and cases."""

    format: Literal[1] = Field(description="ruleset format version")
    id: Identifier
    title: str
    family: Identifier = Field(description="lamp, motor, sensor_feed, starter, key_off_draw, or another")
    version: Annotated[str, Field(min_length=1)]
    system_voltage: Volts = Field(gt=0)
    applies_to: tuple[Vehicle, ...] = ()
    cautions: tuple[str, ...] = ()
    ground: Identifier = Field(default="GND", description="the reference node (chassis ground)")
    power: Identifier | None = Field(
        default=None, description="node a short to power goes to (default: the battery's positive)"
    )
    nodes: dict[Identifier, Node]
    components: tuple[Component, ...] = Field(min_length=1)
    states: dict[Identifier, State] = Field(min_length=1)
    preparations: dict[Identifier, Preparation] = {}
    tests: tuple[Test, ...] = Field(min_length=1)
    complaints: tuple[Complaint, ...] = ()
    rules: tuple[Rule, ...] = ()
    cases: tuple[Case, ...] = ()
    threshold: float = Field(default=0.95, gt=0.5, lt=1, description="stop when a fault reaches it")
    none_weight: float = Field(
        default=0.2, ge=0, description="prior weight of 'none' (no fault in this circuit), beside the fault weights"
    )

    @field_validator("version", mode="before")
    @classmethod
    def _version_text(cls, value: Any) -> Any:
        return _text_version(value)

    @field_validator("nodes", mode="before")
    @classmethod
    def _empty_nodes(cls, value: Any) -> Any:
        # `B_POS:` with nothing after it is a node with no probe notes yet.
        if isinstance(value, dict):
            return {k: ({} if v is None else v) for k, v in value.items()}
        return value
