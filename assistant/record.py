"""What a diagnosis session leaves behind: frozen records of the session and each of its steps.

The session writes these, the store persists them, and the trail, report and export read them.
A step is one thing that happened, in order: a reading taken, a test skipped, an answer taken
back, a note, a rule that fired, the conclusion, the repair, the verification. Times are UTC,
ISO 8601. Readings are SI floats with their unit, or ``None`` with ``reading_text`` "OL" or an
observation outcome.
"""

from __future__ import annotations

from typing import Literal

from pydantic import BaseModel, ConfigDict, Field

StepKind = Literal[
    "start",  # complaint, vehicle and fault codes taken
    "reading",  # a test answered
    "skip",  # a test the technician could not make now
    "undo",  # the last answer taken back (refers to it by index)
    "remeasure",  # a test asked again
    "note",  # free text from the technician
    "rule",  # a decision rule fired
    "conclusion",  # the planner stopped
    "repair",  # the repair done
    "verification",  # the reading that proves the repair
    "close",  # the session closed
]

SessionStatus = Literal["open", "concluded", "closed", "abandoned"]


class Record(BaseModel):
    """Base of the session records: immutable, unknown keys rejected."""

    model_config = ConfigDict(frozen=True, extra="forbid")


class VehicleInfo(Record):
    """The vehicle as the technician gave it; every field optional."""

    vin: str | None = None
    odometer_km: float | None = None
    model_year: int | None = None
    fleet_number: str | None = None


class Step(Record):
    """One step of a session, in the order it happened."""

    index: int = Field(ge=0)
    kind: StepKind
    at: str  # UTC ISO 8601 time stamp
    test_id: str | None = None
    reading: float | None = None  # SI value; None for OL or an observation
    reading_text: str | None = None  # as typed, or "OL", or the outcome
    unit: str | None = None
    expected_low: float | None = None  # the healthy range (5th-95th percentile under "none")
    expected_high: float | None = None
    verdict: str | None = None  # "in range", "low", "high", "OL", ...
    top: tuple[tuple[str, float], ...] = ()  # leading hypotheses after this step, with probabilities
    rules_fired: tuple[str, ...] = ()
    note: str | None = None
    refers_to: int | None = None  # for undo: the step taken back
    digest: str | None = None  # SHA-256 hex of this step chained to the previous one


class SessionRecord(Record):
    """A whole session: who, what vehicle, which ruleset, every step, and how it ended."""

    id: str
    ruleset_id: str
    ruleset_version: str
    ruleset_sha256: str
    ruleset_path: str | None = None  # the file it was loaded from, to resume the session
    source: str | None = None  # where the readings came from: "prompt", "answers FILE", "simulate FAULT seed S"
    threshold: float | None = None  # the probability at which the planner stops, if not the ruleset's
    overlays: tuple[str, ...] = ()
    meter_profile: str = "default"
    technician: str | None = None
    vehicle: VehicleInfo = VehicleInfo()
    complaint: str | None = None
    fault_codes: tuple[str, ...] = ()
    started: str
    finished: str | None = None
    status: SessionStatus = "open"
    steps: tuple[Step, ...] = ()
    diagnosis: str | None = None
    probability: float | None = None
    alternatives: tuple[tuple[str, float], ...] = ()
    ambiguity_group: tuple[str, ...] = ()  # faults no test of the ruleset tells from the diagnosis (it first)
    group_probability: float | None = None  # the ambiguity group's probability together, when there is one
    stopped_because: str | None = None
    repair: str | None = None
    verification: str | None = None
    cautions: tuple[str, ...] = ()
