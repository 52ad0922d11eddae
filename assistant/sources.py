"""Where a session's readings come from: a person, a scripted file, or the circuit simulator.

The session asks a :class:`ReadingSource` for one thing at a time and does everything else
itself (parsing, the diagnosis, the store), so the three sources go through the same code:

- :class:`assistant.prompt.PromptSource`: a technician at the terminal (prompt-toolkit);
- :class:`AnswersFileSource`: readings by test id from a YAML or JSON file (tests it lacks are
  answered ``skip``); for demos, training and regression tests;
- :class:`SimulatedSource`: the circuit model answers as the meter would under a chosen
  fault, with meter noise (``assistant.simulate.draw_reading``).

:class:`Narrated` wraps any source and writes the conversation as the technician would see it.
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any, Protocol, Union

import numpy as np
from pydantic import ValidationError

from assistant.display import format_quantity
from assistant.errors import AnswersFileError, ReadingError, RulesetError, SessionError
from assistant.reading import Reading, parse_reading
from assistant.record import VehicleInfo
from assistant.ruleset.load import Locator, parse_yaml, read_text, to_plain

if TYPE_CHECKING:
    from assistant.page import ClosingPage, Question
    from assistant.predict import PredictionTable, TestInfo
    from assistant.ruleset.model import Ruleset

log = logging.getLogger("ohmtrail.sources")


# --------------------------------------------------------------------------- what a source answers


@dataclass(frozen=True)
class Intake:
    """What is asked before the first test: who, which vehicle, the complaint, fault codes."""

    technician: str | None = None
    vehicle: VehicleInfo = VehicleInfo()
    complaint: str | None = None  # a complaint id of the ruleset
    fault_codes: tuple[str, ...] = ()
    notes: tuple[str, ...] = ()


@dataclass(frozen=True)
class Answer:
    """A reading for the test asked: typed text (parsed by the session) or a Reading as is."""

    text: str = ""
    reading: Reading | None = None


@dataclass(frozen=True)
class Skip:
    """The test cannot be made now: choose another."""


@dataclass(frozen=True)
class Undo:
    """Take back the last answer."""


@dataclass(frozen=True)
class Note:
    """Free text for the record."""

    text: str


@dataclass(frozen=True)
class Remeasure:
    """Ask for a test again (a reading in doubt)."""

    test_id: str


@dataclass(frozen=True)
class Quit:
    """Stop here; the session stays open and can be resumed."""


Action = Union[Answer, Skip, Undo, Note, Remeasure, Quit]


@dataclass(frozen=True)
class Closing:
    """What the technician did at the end: the repair, and the verification reading as typed."""

    repair: str
    verification: Answer | None = None


class ReadingSource(Protocol):
    """Something that answers the session's questions, one at a time."""

    label: str  # recorded as the session's source: "prompt", "answers FILE", ...

    def intake(self, ruleset: Ruleset) -> Intake:
        """The vehicle, technician, complaint and fault codes."""

    def ask(self, question: Question) -> Action:
        """The answer to one test page (or a command)."""

    def refused(self, question: Question, reason: str) -> None:
        """The last answer could not be taken (one line why); the same question comes again."""

    def tell(self, message: str) -> None:
        """Something the technician should know (an undo done, a rule that fired, a resume)."""

    def close(self, page: ClosingPage) -> Closing | None:
        """At the stop: the repair done and the verification reading, or None to leave it open."""


# --------------------------------------------------------------------------- scripted answers

_ANSWER_KEYS = ("complaint", "technician", "vehicle", "fault_codes", "readings", "notes", "repair",
                "verification")


@dataclass(frozen=True)
class AnswersFile:
    """A validated answers file: readings by test id, checked against the ruleset's tests."""

    path: str
    intake: Intake
    readings: Mapping[str, Reading]
    repair: str | None = None
    verification: str | None = None  # as written; parsed against the verification test at the end


def load_answers(path: str | Path, ruleset: Ruleset, tests: Sequence[TestInfo]) -> AnswersFile:
    """Read and check an answers file; every problem is a located :class:`AnswersFileError`."""
    name = str(path)
    _, text = read_text(Path(path), AnswersFileError)  # type: ignore[arg-type]  # any LocatedError works
    tree = parse_yaml(text, name, AnswersFileError)  # type: ignore[arg-type]
    locator = Locator(name, tree)

    def fail(message: str, *where: str | int, at_key: bool = False, value: Any = None) -> AnswersFileError:
        problem = locator.problem(message, where, value, at_key=at_key)
        return AnswersFileError(problem.message, file=problem.file, line=problem.line, column=problem.column,
                                field=problem.field, value=value)

    try:
        data = to_plain(tree, locator)
    except RulesetError as exc:  # a YAML tag or a date: the same place, as an answers-file error
        problem = exc.problems[0]
        raise AnswersFileError(problem.message, file=name, line=problem.line, column=problem.column) from exc
    if not isinstance(data, dict):
        raise fail("an answers file is a mapping with 'readings' (and complaint, vehicle, ...)")
    for key in data:
        if key not in _ANSWER_KEYS:
            raise fail(f"unknown field '{key}'; expected one of: {', '.join(_ANSWER_KEYS)}", key, at_key=True)

    complaint = data.get("complaint")
    if complaint is not None:
        ids = [c.id for c in ruleset.complaints]
        if complaint not in ids:
            raise fail(f"unknown complaint '{complaint}' for ruleset {ruleset.id}; expected one of: "
                       f"{', '.join(ids) or '(none defined)'}", "complaint", value=complaint)
    try:
        vehicle = VehicleInfo.model_validate(data.get("vehicle") or {})
    except ValidationError as exc:
        err = exc.errors(include_url=False)[0]
        loc = [str(p) for p in err["loc"]]
        what = "unknown field" if err["type"] == "extra_forbidden" else err["msg"]
        raise fail(f"vehicle.{'.'.join(loc)}: {what}", "vehicle", *loc,
                   at_key=err["type"] == "extra_forbidden") from exc
    codes = data.get("fault_codes") or []
    notes = data.get("notes") or []
    if isinstance(notes, str):
        notes = [notes]
    for key, value in (("fault_codes", codes), ("notes", notes)):
        if not isinstance(value, list) or not all(isinstance(v, (str, int)) for v in value):
            raise fail(f"{key} is a list of texts", key)

    by_id = {t.id: t for t in tests}
    readings_in = data.get("readings") or {}
    if not isinstance(readings_in, dict):
        raise fail("readings map test ids to readings, e.g. 'v_fuse: 12.4 V'", "readings")
    readings: dict[str, Reading] = {}
    for test_id, value in readings_in.items():
        test = by_id.get(test_id)
        if test is None:
            raise fail(f"unknown test '{test_id}' for ruleset {ruleset.id}; expected one of: "
                       f"{', '.join(by_id)}", "readings", test_id, at_key=True, value=test_id)
        if isinstance(value, bool) or not isinstance(value, (str, int, float)):
            raise fail(f"reading for {test_id} must be a number or a text like '12.4 V'", "readings", test_id)
        try:
            readings[test_id] = parse_reading(str(value), test)
        except ReadingError as exc:
            raise fail(f"{test_id}: {exc}", "readings", test_id, value=value) from exc
    repair = data.get("repair")
    verification = data.get("verification")
    if repair is not None and not isinstance(repair, str):
        raise fail("repair is a text: what was done", "repair")
    if verification is not None and not isinstance(verification, (str, int, float)):
        raise fail("verification is the reading of the verification test, e.g. '12.4 V'", "verification")
    intake = Intake(technician=_text(data.get("technician")), vehicle=vehicle, complaint=complaint,
                    fault_codes=tuple(str(c) for c in codes), notes=tuple(str(n) for n in notes))
    return AnswersFile(name, intake, readings, repair,
                       None if verification is None else str(verification))


def _text(value: Any) -> str | None:
    return None if value is None else str(value)


@dataclass
class AnswersFileSource:
    """Answers from a file: each test's reading once; a test the file lacks is skipped."""

    answers: AnswersFile
    label: str = ""
    _given: set[str] = field(default_factory=set)

    def __post_init__(self) -> None:
        self.label = self.label or f"answers {self.answers.path}"

    def intake(self, ruleset: Ruleset) -> Intake:
        return self.answers.intake

    def ask(self, question: Question) -> Action:
        test_id = question.test.id
        reading = self.answers.readings.get(test_id)
        if reading is None or test_id in self._given:
            return Skip()  # not in the file, or asked a second time: the file has one reading each
        self._given.add(test_id)
        return Answer(text=reading.text, reading=reading)

    def refused(self, question: Question, reason: str) -> None:
        raise AnswersFileError(f"reading for {question.test.id} cannot be used: {reason}",
                               file=self.answers.path, field=f"readings.{question.test.id}")

    def tell(self, message: str) -> None:
        log.info("%s", message)

    def close(self, page: ClosingPage) -> Closing | None:
        if self.answers.repair is None:
            return None
        verification = None
        if self.answers.verification is not None and page.verification is not None:
            verification = Answer(text=self.answers.verification)
        return Closing(self.answers.repair, verification)


# --------------------------------------------------------------------------- simulated answers


class SimulatedSource:
    """The circuit model answers under one hypothesis, with meter noise; deterministic for a seed.

    At the stop it does the repair the diagnosis names; the verification reading is drawn as the
    circuit would then read: healthy if the repair removed the simulated fault, else still faulty.
    ``table`` is the one the vehicle is drawn from: ``ohmtrail diagnose --simulate`` passes
    :func:`assistant.simulate.vehicle_table`, a second Monte Carlo run of the circuit, so that the
    vehicle is not one of the samples the engine reasons on.
    """

    def __init__(self, table: PredictionTable, hypothesis_id: str, seed: int = 0,
                 intake: Intake | None = None) -> None:
        try:
            self.hypothesis = table.hypothesis_index(hypothesis_id)
        except KeyError as exc:
            known = [h.id for h in table.hypotheses]
            raise SessionError(f"unknown fault '{hypothesis_id}' for ruleset {table.ruleset_id}; "
                               f"`ohmtrail predict` lists the {len(known)} it knows") from exc
        self.table = table
        self.hypothesis_id = hypothesis_id
        self.seed = seed
        self.rng = np.random.default_rng(seed)
        # One Monte Carlo sample for the whole vehicle: one fault magnitude behind every reading.
        self.sample = int(self.rng.integers(table.samples.shape[2]))
        self._intake = intake or Intake(technician="simulator")
        self.label = f"simulate {hypothesis_id} seed {seed}"

    def intake(self, ruleset: Ruleset) -> Intake:
        return self._intake

    def _draw(self, hypothesis: int, test_id: str, sample: int | None = None) -> Reading:
        from assistant.simulate import draw_reading  # the diagnosis engine's meter model

        reading = draw_reading(self.table, hypothesis, self.table.test_index(test_id), self.rng,
                               sample=self.sample if sample is None else sample)
        if reading.value is None:
            return reading
        # As the meter shows it: 25.3 mV, and 0.0253 rather than the float 0.025300000000000003.
        value = float(f"{reading.value:.12g}")
        return Reading(text=format_quantity(value, self.table.tests[self.table.test_index(test_id)].unit),
                       value=value)

    def ask(self, question: Question) -> Action:
        return Answer(reading=self._draw(self.hypothesis, question.test.id))

    def refused(self, question: Question, reason: str) -> None:
        raise SessionError(f"the simulator's reading for {question.test.id} was refused: {reason}")

    def tell(self, message: str) -> None:
        log.info("%s", message)

    def close(self, page: ClosingPage) -> Closing | None:
        repair = page.repair_action or "no repair named"
        if page.verification is None:
            return Closing(repair)
        true_faults = set(self.table.hypotheses[self.hypothesis].faults)
        repaired = set(page.repaired_faults)
        if true_faults <= repaired:  # the repair removed the fault: the circuit reads as a healthy one
            reading = self._draw(0, page.verification.test.id, int(self.rng.integers(self.table.samples.shape[2])))
        else:
            reading = self._draw(self.hypothesis, page.verification.test.id)
        return Closing(repair, Answer(reading=reading))


# --------------------------------------------------------------------------- the conversation, written


class Narrated:
    """Any source, with the conversation written out as the technician would see it."""

    def __init__(self, inner: ReadingSource, write: Callable[[str], None]) -> None:
        from assistant.page import render_closing, render_intake, render_page

        self.inner = inner
        self.write = write
        self.label = inner.label
        self._render_page, self._render_intake, self._render_closing = render_page, render_intake, render_closing

    def intake(self, ruleset: Ruleset) -> Intake:
        intake = self.inner.intake(ruleset)
        self.write(self._render_intake(ruleset, intake))
        return intake

    def ask(self, question: Question) -> Action:
        self.write(self._render_page(question))
        action = self.inner.ask(question)
        self.write(f"> {describe(action)}\n")
        return action

    def refused(self, question: Question, reason: str) -> None:
        self.write(f"  not taken: {reason}")
        self.inner.refused(question, reason)

    def tell(self, message: str) -> None:
        self.write(f"  {message}")
        self.inner.tell(message)

    def close(self, page: ClosingPage) -> Closing | None:
        self.write(self._render_closing(page))
        closing = self.inner.close(page)
        if closing is not None:
            self.write(f"> repair done: {closing.repair}")
            if closing.verification is not None:
                self.write(f"> verification reading: {describe(closing.verification)}")
        return closing


def describe(action: Action) -> str:
    """An action as the technician would have typed it."""
    if isinstance(action, Answer):
        return action.reading.text if action.reading is not None else action.text
    if isinstance(action, Note):
        return f"note {action.text}"
    if isinstance(action, Remeasure):
        return f"remeasure {action.test_id}"
    return type(action).__name__.lower()
