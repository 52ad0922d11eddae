"""A diagnosis session: the diagnosis engine driven by a reading source, every step stored as it happens.

The session is a small state machine over an immutable :class:`~assistant.diagnosis.Diagnosis`:

    intake ─► start step ─► ┌─ next() is a Proposal ─► ask the source ─► answer / skip / undo /
                            │                                            note / remeasure / quit
                            └─ next() is a Conclusion ─► conclusion step ─► repair, verification,
                                                                            close (or left concluded)

Each step is sealed with its digest (``assistant.export.step_digest``, chained to the one before)
and committed to the store before the next question is put, so a process killed at any moment
has lost nothing already answered. Resuming replays the stored steps through a fresh
Diagnosis, which is deterministic, and carries on from the same state.
"""

from __future__ import annotations

import logging
import secrets
from collections.abc import Callable
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import TYPE_CHECKING, Any

from typing_extensions import TypeIs

from assistant.errors import OhmtrailError, ReadingError, SessionError
from assistant.export import step_digest
from assistant.page import PageMaker, Question, verdict
from assistant.reading import Reading, parse_reading
from assistant.record import SessionRecord, Step
from assistant.sources import Answer, Intake, Note, Quit, ReadingSource, Remeasure, Skip, Undo

if TYPE_CHECKING:
    from assistant.diagnosis import Conclusion, Diagnosis, Proposal
    from assistant.meter import MeterProfile
    from assistant.predict import PredictionTable
    from assistant.ruleset.load import LoadedRuleset
    from assistant.store import Store

log = logging.getLogger("ohmtrail.session")

MAX_QUESTIONS = 1000  # a planner that never stops is a bug; the session says so rather than loop


def new_session_id() -> str:
    """A short id a technician can type: UTC time and four random hex digits."""
    return f"{datetime.now(timezone.utc):%Y%m%d-%H%M%S}-{secrets.token_hex(2)}"


def now() -> str:
    """The UTC time stamp of a step, ISO 8601 to the millisecond."""
    return datetime.now(timezone.utc).isoformat(timespec="milliseconds")


def context_of(record: SessionRecord) -> Any:
    """The diagnosis Context (complaint, vehicle facts, fault codes) of a session record."""
    from assistant.diagnosis import Context

    vehicle = {k: v for k, v in record.vehicle.model_dump().items() if v is not None}
    return Context(complaint=record.complaint, vehicle=vehicle, fault_codes=record.fault_codes)


@dataclass(frozen=True)
class Engine:
    """What a session runs on: the ruleset, its prediction table, the meter and the pages."""

    loaded: LoadedRuleset
    table: PredictionTable
    pages: PageMaker
    start: Callable[..., Diagnosis]  # Diagnosis.start
    context: Callable[[SessionRecord], Any] = context_of  # the diagnosis Context of a record

    @classmethod
    def build(cls, loaded: LoadedRuleset, meter: MeterProfile | None = None, *,
              table: PredictionTable | None = None) -> Engine:
        """The real engine: predict() over the ruleset, the default meter if none is given."""
        from assistant.diagnosis import Diagnosis
        from assistant.meter import default_meter
        from assistant.predict import predict

        profile = meter or default_meter()
        table = table if table is not None else predict(loaded, profile)
        return cls(loaded, table, PageMaker(loaded, table, profile), Diagnosis.start)


def engine_for_record(record: SessionRecord, meter: MeterProfile | None = None) -> Engine:
    """The engine a stored session ran on: its ruleset file and overlays, unchanged, predicted anew.

    The meter is the one given, else the profile file the session was started with.
    """
    from assistant.meter import load_meter_profile
    from assistant.ruleset.load import load_ruleset

    if meter is None and record.meter_profile != "default":
        meter = load_meter_profile(record.meter_profile)

    if not record.ruleset_path:
        raise SessionError(f"session {record.id} does not say which ruleset file it used")
    overlays = [label.rsplit(" sha256:", 1)[0] for label in record.overlays]
    loaded = load_ruleset(record.ruleset_path, overlays, beside=False)
    if loaded.sha256 != record.ruleset_sha256 or loaded.overlays != record.overlays:
        raise SessionError(f"ruleset {record.ruleset_path} or its overlays changed since session {record.id} "
                           "started (SHA-256 differs), so its readings would not mean the same")
    return Engine.build(loaded, meter)


def reading_of(step: Step) -> Reading:
    """The Reading a stored reading step was taken from (see the record module's conventions)."""
    if step.reading is not None:
        return Reading(text=step.reading_text or repr(step.reading), value=step.reading)
    if step.reading_text == "OL":
        return Reading(text="OL", overload=True)
    if step.reading_text:
        return Reading(text=step.reading_text, outcome=step.reading_text)
    raise SessionError(f"step {step.index} holds no reading")


class Session:
    """One diagnosis of one vehicle: its record in the store and the engine's current state."""

    def __init__(self, store: Store, record: SessionRecord, engine: Engine, diagnosis: Diagnosis,
                 pending: Proposal | None = None) -> None:
        self.store = store
        self.engine = engine
        self.diagnosis = diagnosis
        self.id = record.id
        self._record = record
        self._steps: list[Step] = list(record.steps)
        self._answers: list[int] = []  # the reading and skip steps now in effect, the last to undo first
        self._pending = pending  # a remeasure asked for: the next question
        self._rules = set(diagnosis.rules_fired)

    # ------------------------------------------------------------------ building

    @classmethod
    def begin(cls, store: Store, engine: Engine, source: ReadingSource, *, meter_name: str = "default",
              threshold: float | None = None, session_id: str | None = None) -> Session:
        """Take the intake from the source, start the diagnosis and write the session's first step."""
        ruleset = engine.loaded.ruleset
        intake = source.intake(ruleset)
        _check_intake(intake, engine)
        record = SessionRecord(
            id=session_id or new_session_id(), ruleset_id=ruleset.id, ruleset_version=ruleset.version,
            ruleset_sha256=engine.loaded.sha256, ruleset_path=str(Path(engine.loaded.path).resolve()),
            source=source.label, threshold=threshold, overlays=engine.loaded.overlays,
            meter_profile=meter_name, technician=intake.technician, vehicle=intake.vehicle,
            complaint=intake.complaint, fault_codes=intake.fault_codes, started=now(),
            cautions=engine.pages.session_cautions(()),
        )
        diagnosis = engine.start(engine.loaded, engine.table, engine.context(record), threshold)
        store.create(record)
        session = cls(store, record, engine, diagnosis)
        session._write_start(source)
        for text in intake.notes:
            session._write("note", note=text)
            source.tell(f"note: {text}")
        log.info("session %s started on %s", record.id, ruleset.id)
        return session

    @classmethod
    def resume(cls, store: Store, session_id: str,
               engine_for: Callable[[SessionRecord], Engine] | None = None) -> Session:
        """The session as it stood at its last stored step, ready to carry on.

        ``engine_for`` builds the engine for the record (default: :func:`engine_for_record`).
        """
        record = store.load(store.find(session_id))
        if record.status in ("closed", "abandoned"):
            raise SessionError(f"session {record.id} is {record.status}; it cannot be resumed")
        engine = (engine_for or engine_for_record)(record)
        diagnosis = engine.start(engine.loaded, engine.table, engine.context(record), record.threshold)
        session = cls(store, record, engine, diagnosis)
        session._replay()
        if not session._steps:
            # Killed between creating the record and writing its first step: write it now, so
            # the trail still opens with the complaint and the rules that fired at the start.
            session._write_start(None)
        return session

    def _write_start(self, source: ReadingSource | None) -> None:
        self._rules = set()
        ruleset = self.engine.loaded.ruleset
        complaint = next((c.text for c in ruleset.complaints if c.id == self._record.complaint), None)
        self._write("start", top=self._top(), note=complaint)
        self._fired(source)

    def _replay(self) -> None:
        for step in self._steps:
            if step.kind == "reading" and step.test_id:
                self.diagnosis = self.diagnosis.answer(step.test_id, reading_of(step))
                self._answers.append(step.index)
                self._pending = None
            elif step.kind == "skip" and step.test_id:
                self.diagnosis = self.diagnosis.skip(step.test_id)
                self._answers.append(step.index)
                self._pending = None
            elif step.kind == "undo":
                self.diagnosis = self.diagnosis.undo()
                if self._answers:
                    self._answers.pop()
            elif step.kind == "remeasure" and step.test_id:
                self._pending = self.diagnosis.remeasure(step.test_id)
        self._rules = set(self.diagnosis.rules_fired)

    # ------------------------------------------------------------------ the record

    @property
    def record(self) -> SessionRecord:
        """The session as stored now."""
        return self.store.load(self.id)

    @property
    def steps(self) -> tuple[Step, ...]:
        return tuple(self._steps)

    def recap(self) -> list[str]:
        """One line per answer, skip, undo and note so far (shown when a session is resumed)."""
        lines = []
        for step in self._steps:
            if step.kind == "reading":
                lines.append(f"{step.index}. {step.test_id}: {shown_reading(step)}"
                             + (f" ({step.verdict})" if step.verdict else ""))
            elif step.kind in ("skip", "remeasure"):
                lines.append(f"{step.index}. {step.test_id}: {step.kind}")
            elif step.kind == "undo":
                lines.append(f"{step.index}. undo (takes back step {step.refers_to})")
            elif step.kind == "note":
                lines.append(f"{step.index}. note: {step.note}")
        return lines

    def _write(self, kind: str, **fields: Any) -> Step:
        previous = self._steps[-1].digest if self._steps else None
        step = Step.model_validate({"index": len(self._steps), "kind": kind, "at": now(), **fields})
        step = step.model_copy(update={"digest": step_digest(previous, step)})
        self.store.append(self.id, step)  # committed before the next question
        self._steps.append(step)
        return step

    def _top(self, n: int = 3) -> tuple[tuple[str, float], ...]:
        return tuple((h, float(p)) for h, p in self.diagnosis.ranking()[:n])

    def _fired(self, source: ReadingSource | None) -> tuple[str, ...]:
        """Write a rule step for each decision rule that fired since the last look; their ids."""
        new = tuple(r for r in self.diagnosis.rules_fired if r not in self._rules)
        why = {r.id: r.why for r in self.engine.loaded.ruleset.rules}
        for rule_id in new:
            self._rules.add(rule_id)
            self._write("rule", rules_fired=(rule_id,), note=why.get(rule_id), top=self._top())
            if source is not None:
                source.tell(f"rule {rule_id}: {why.get(rule_id) or 'fired'}")
        return new

    # ------------------------------------------------------------------ running

    def run(self, source: ReadingSource) -> SessionRecord:
        """Ask, record, repeat until the diagnosis stops or the source quits; the record as stored."""
        if self._record.status == "concluded" or self._concluded():
            return self._close(source)
        for _ in range(MAX_QUESTIONS):
            proposal = self._pending
            if proposal is None:
                step = self.diagnosis.next()
                if not _is_proposal(step):
                    return self._conclude(step, source)
                proposal = step
            question = self.engine.pages.question(proposal, self.diagnosis, answered=len(self._answers))
            action = source.ask(question)
            if isinstance(action, Quit):
                log.info("session %s left open after %d steps", self.id, len(self._steps))
                return self.record
            self._act(action, question, source)
        raise SessionError(f"the diagnosis did not stop after {MAX_QUESTIONS} questions")

    def _concluded(self) -> bool:
        return any(s.kind == "conclusion" for s in self._steps)

    def _act(self, action: Any, question: Question, source: ReadingSource) -> None:
        test_id = question.test.id
        if isinstance(action, Answer):
            self._answer(action, question, source)
        elif isinstance(action, Skip):
            self.diagnosis = self.diagnosis.skip(test_id)
            self._pending = None
            step = self._write("skip", test_id=test_id, top=self._top())
            self._answers.append(step.index)
            self._fired(source)
        elif isinstance(action, Undo):
            self._undo(source)
        elif isinstance(action, Note):
            text = action.text.strip()
            if text:
                self._write("note", note=text, test_id=test_id)
                source.tell("note saved")
            else:
                source.tell("a note needs text: note TEXT")
        elif isinstance(action, Remeasure):
            self._remeasure(action.test_id, source)
        else:
            raise SessionError(f"the reading source gave something that is not an action: {action!r}")

    def _answer(self, action: Answer, question: Question, source: ReadingSource) -> None:
        test = question.test
        try:
            reading = action.reading if action.reading is not None else parse_reading(action.text, test)
            diagnosis = self.diagnosis.answer(test.id, reading)
        except ReadingError as exc:
            source.refused(question, str(exc))
            return
        self.diagnosis = diagnosis
        self._pending = None
        page = question.page
        step = self._write(
            "reading", test_id=test.id, reading=reading.value,
            reading_text="OL" if reading.overload else (reading.outcome or reading.text),
            unit=test.unit or None, expected_low=page.healthy_low, expected_high=page.healthy_high,
            verdict=verdict(reading, page), top=self._top(),
        )
        self._answers.append(step.index)
        lead, p = step.top[0] if step.top else ("-", 0.0)
        source.tell(f"recorded {test.id}: {shown_reading(step)}" + (f" ({step.verdict})" if step.verdict else "")
                    + f"; leading suspect {lead} {p:.0%}")
        self._fired(source)
        conflict = getattr(self.diagnosis, "conflict", None)
        if conflict is not None:  # its message names the reading to re-measure
            source.tell(f"{conflict.message} (type remeasure {conflict.test_id}, or undo)")

    def _undo(self, source: ReadingSource) -> None:
        try:
            self.diagnosis = self.diagnosis.undo()
        except SessionError as exc:
            source.tell(str(exc))
            return
        taken_back = self._answers.pop() if self._answers else None
        self._pending = None
        self._write("undo", refers_to=taken_back, top=self._top())
        what = self._steps[taken_back] if taken_back is not None else None
        if what is None:
            source.tell("took back the last answer")
        elif what.kind == "skip":
            source.tell(f"took back the skip of {what.test_id}")
        else:
            source.tell(f"took back {what.test_id}: {shown_reading(what)}")

    def _remeasure(self, test_id: str, source: ReadingSource) -> None:
        try:
            proposal = self.diagnosis.remeasure(test_id)
        except (OhmtrailError, KeyError) as exc:
            source.tell(f"cannot re-measure '{test_id}': {exc}")
            return
        self._pending = proposal
        self._write("remeasure", test_id=test_id, top=self._top())

    def _conclude(self, conclusion: Conclusion, source: ReadingSource) -> SessionRecord:
        self._write("conclusion", test_id=conclusion.verification_test, note=conclusion.stopped_because,
                    top=tuple((h, float(p)) for h, p in conclusion.ranking[:3]))
        alternatives = tuple((h, float(p)) for h, p in conclusion.ranking if h != conclusion.diagnosis)[:5]
        repair = conclusion.repairs[0].action if conclusion.repairs else None
        self.store.update(
            self.id, status="concluded", diagnosis=conclusion.diagnosis,
            probability=float(conclusion.probability), alternatives=alternatives,
            stopped_because=conclusion.stopped_because, repair=repair,
            ambiguity_group=tuple(getattr(conclusion, "group", ())),
            group_probability=float(conclusion.group_probability) if getattr(conclusion, "group", ()) else None,
            cautions=self.engine.pages.session_cautions(getattr(self.diagnosis, "cautions", ())),
        )
        self._record = self.store.load(self.id)
        return self._close(source, conclusion)

    def _close(self, source: ReadingSource, conclusion: Conclusion | None = None) -> SessionRecord:
        step = conclusion or self.diagnosis.next()
        if _is_proposal(step):  # resumed a concluded session whose engine now asks more
            raise SessionError(f"session {self.id} was concluded but its diagnosis asks for more tests")
        conclusion = step
        page = self.engine.pages.closing(conclusion, self.diagnosis)
        closing = source.close(page)
        reading: Reading | None = None
        while closing is not None and closing.verification is not None and page.verification is not None:
            answer = closing.verification
            try:
                reading = answer.reading or parse_reading(answer.text, page.verification.test)
                break
            except ReadingError as exc:
                source.refused(page.verification, str(exc))
                closing = source.close(page)
        if closing is None:
            return self.record
        self._write("repair", note=closing.repair)
        fields: dict[str, Any] = {"repair": closing.repair}
        if reading is not None and page.verification is not None:
            vpage, test = page.verification.page, page.verification.test
            mark = verdict(reading, vpage)
            text = "OL" if reading.overload else (reading.outcome or reading.text)
            self._write("verification", test_id=test.id, reading=reading.value, reading_text=text,
                        unit=test.unit or None, expected_low=vpage.healthy_low,
                        expected_high=vpage.healthy_high, verdict=mark)
            fields["verification"] = f"{test.id}: {text}" + (f" ({mark})" if mark else "")
        self._write("close")
        self.store.update(self.id, status="closed", finished=now(), **fields)
        return self.record


def _is_proposal(step: Proposal | Conclusion) -> TypeIs[Proposal]:
    """A next test rather than a conclusion (by shape, so that test engines may stand in)."""
    return hasattr(step, "test_id") and hasattr(step, "gain_bits")


def shown_reading(step: Step) -> str:
    """A stored reading as typed, with the unit added to a bare number."""
    text = (step.reading_text or "").strip()
    if step.reading is not None and step.unit and text[-1:].isdigit():
        return f"{text} {step.unit}"
    return text


def _check_intake(intake: Intake, engine: Engine) -> None:
    ids = [c.id for c in engine.loaded.ruleset.complaints]
    if intake.complaint is not None and intake.complaint not in ids:
        raise SessionError(f"unknown complaint '{intake.complaint}'; expected one of: {', '.join(ids)}")


def summary_json(record: SessionRecord) -> dict[str, Any]:
    """The one object ``ohmtrail diagnose --json`` prints for a session."""
    steps = []
    for step in record.steps:
        if step.kind not in ("reading", "skip"):
            continue
        reading: float | str | None = step.reading if step.reading is not None else step.reading_text
        steps.append({"test": step.test_id, "kind": step.kind, "reading": reading if step.kind == "reading" else None,
                      "unit": step.unit, "top": [[h, p] for h, p in step.top]})
    return {"session": record.id, "ruleset": record.ruleset_id, "status": record.status,
            "diagnosis": record.diagnosis, "probability": record.probability,
            "ambiguity_group": list(record.ambiguity_group), "group_probability": record.group_probability,
            "steps": steps, "stopped_because": record.stopped_because}


def session_json(record: SessionRecord) -> dict[str, Any]:
    """A stored session for ``ohmtrail sessions --json``: its header and every step, briefly."""
    steps = [{"index": s.index, "kind": s.kind, "at": s.at, "test": s.test_id,
              "reading": s.reading if s.reading is not None else s.reading_text, "unit": s.unit,
              "verdict": s.verdict, "note": s.note} for s in record.steps]
    return {"id": record.id, "ruleset": record.ruleset_id, "ruleset_version": record.ruleset_version,
            "source": record.source, "vehicle": record.vehicle.model_dump(), "technician": record.technician,
            "complaint": record.complaint, "fault_codes": list(record.fault_codes), "started": record.started,
            "finished": record.finished, "status": record.status, "step_count": len(record.steps),
            "diagnosis": record.diagnosis, "probability": record.probability,
            "ambiguity_group": list(record.ambiguity_group), "group_probability": record.group_probability,
            "steps": steps}

