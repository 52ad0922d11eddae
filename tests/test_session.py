"""The session state machine on a stand-in engine: what is stored, in what order, and resuming."""

from __future__ import annotations

from collections.abc import Iterable
from pathlib import Path
from typing import Any

import pytest

from assistant.errors import SessionError
from assistant.export import step_digest
from assistant.page import ClosingPage, Question
from assistant.record import SessionRecord
from assistant.session import Session, summary_json
from assistant.sources import Action, Answer, Closing, Intake, Note, Quit, Remeasure, Skip, Undo
from assistant.store import Store, open_store
from tests.fake_engine import fake_engine


class Scripted:
    """A reading source that plays a fixed list of actions and remembers what it was told."""

    label = "scripted"

    def __init__(self, actions: Iterable[Action], closing: Closing | None = None,
                 intake: Intake | None = None) -> None:
        self.actions = list(actions)
        self.closing = closing
        self._intake = intake or Intake(technician="T. Tester", complaint="dim")
        self.asked: list[str] = []
        self.refusals: list[str] = []
        self.told: list[str] = []

    def intake(self, ruleset: Any) -> Intake:
        return self._intake

    def ask(self, question: Question) -> Action:
        self.asked.append(question.test.id + ("!" if question.page.remeasure else ""))
        return self.actions.pop(0) if self.actions else Quit()

    def refused(self, question: Question, reason: str) -> None:
        self.refusals.append(reason)

    def tell(self, message: str) -> None:
        self.told.append(message)

    def close(self, page: ClosingPage) -> Closing | None:
        return self.closing


@pytest.fixture()
def store(tmp_path: Path) -> Iterable[Store]:
    with open_store(f"sqlite:///{tmp_path / 's.db'}") as s:
        yield s


def kinds(record: SessionRecord) -> list[str]:
    return [s.kind for s in record.steps]


def test_a_whole_session_is_stored_step_by_step(tmp_path: Path, store: Store) -> None:
    engine = fake_engine(tmp_path)
    source = Scripted([Answer("4.1 V")], Closing("new lamp fitted", Answer("12.5")))
    session = Session.begin(store, engine, source, session_id="s1")
    record = session.run(source)
    assert kinds(record) == ["start", "rule", "reading", "rule", "conclusion", "repair", "verification", "close"]
    reading = record.steps[2]
    assert (reading.test_id, reading.reading, reading.reading_text, reading.unit) == ("t_volts", 4.1, "4.1 V", "V")
    assert reading.verdict == "low" and (reading.expected_low, reading.expected_high) == (11.5, 12.7)
    assert reading.top[0] == ("lamp.open", 0.97)
    assert record.steps[1].rules_fired == ("complaint_rule",) and record.steps[3].rules_fired == ("low_volts_rule",)
    assert record.status == "closed" and record.diagnosis == "lamp.open" and record.probability == 0.97
    assert record.stopped_because == "threshold reached"
    assert record.repair == "new lamp fitted" and record.verification == "t_volts: 12.5 (in range)"
    assert record.technician == "T. Tester" and record.complaint == "dim" and record.source == "scripted"
    assert record.finished is not None


def test_every_step_is_chained_to_the_one_before(tmp_path: Path, store: Store) -> None:
    source = Scripted([Answer("12.4"), Answer("yes")], Closing("cleaned the ground"))
    record = Session.begin(store, fake_engine(tmp_path), source, session_id="s1").run(source)
    previous = None
    for step in record.steps:
        assert step.digest == step_digest(previous, step.model_copy(update={"digest": None}))
        previous = step.digest


def test_a_refused_reading_is_asked_again_and_not_stored(tmp_path: Path, store: Store) -> None:
    # "12 ohm" is not a voltage (the parser); 45 V is beyond the circuit (the engine refuses it).
    source = Scripted([Answer("12 ohm"), Answer("45"), Answer("4.0")])
    record = Session.begin(store, fake_engine(tmp_path), source, session_id="s1").run(source)
    assert source.asked[:3] == ["t_volts", "t_volts", "t_volts"]
    assert "is not a voltage" in source.refusals[0] and "above any voltage" in source.refusals[1]
    assert [s.reading for s in record.steps if s.kind == "reading"] == [4.0]


def test_undo_takes_back_the_last_answer(tmp_path: Path, store: Store) -> None:
    source = Scripted([Answer("12.4"), Undo(), Answer("4.0")])
    record = Session.begin(store, fake_engine(tmp_path), source, session_id="s1").run(source)
    steps = record.steps
    undo = next(s for s in steps if s.kind == "undo")
    assert steps[undo.refers_to].kind == "reading" and steps[undo.refers_to].reading == 12.4  # type: ignore[index]
    assert source.asked[:3] == ["t_volts", "t_look", "t_volts"]  # after the undo, t_volts again
    assert record.diagnosis == "lamp.open"


def test_undo_takes_back_a_skip_too(tmp_path: Path, store: Store) -> None:
    source = Scripted([Skip(), Undo(), Answer("4.0")])
    record = Session.begin(store, fake_engine(tmp_path), source, session_id="s1").run(source)
    undo = next(s for s in record.steps if s.kind == "undo")
    assert record.steps[undo.refers_to].kind == "skip"  # type: ignore[index]
    assert "took back the skip of t_volts" in source.told
    assert source.asked[:3] == ["t_volts", "t_look", "t_volts"]


def test_undo_with_nothing_to_undo_is_told_not_stored(tmp_path: Path, store: Store) -> None:
    source = Scripted([Undo()])
    record = Session.begin(store, fake_engine(tmp_path), source, session_id="s1").run(source)
    assert "nothing to undo" in source.told
    assert "undo" not in kinds(record)


def test_skip_note_and_remeasure(tmp_path: Path, store: Store) -> None:
    source = Scripted([Answer("12.4"), Note("holder contacts green"), Note("  "), Remeasure("t_nowhere"),
                       Remeasure("t_volts"), Answer("12.5"), Skip()])
    record = Session.begin(store, fake_engine(tmp_path), source, session_id="s1").run(source)
    assert source.asked == ["t_volts", "t_look", "t_look", "t_look", "t_look", "t_volts!", "t_look"]
    assert kinds(record)[2:] == ["reading", "note", "remeasure", "reading", "skip", "conclusion"]
    assert record.steps[3].note == "holder contacts green" and record.steps[3].test_id == "t_look"
    assert [s.reading for s in record.steps if s.kind == "reading"] == [12.4, 12.5]
    assert record.status == "concluded"  # no tests left, and the scripted source records no repair
    assert record.stopped_because == "no tests left" and record.diagnosis is None
    assert "a note needs text: note TEXT" in source.told
    assert any(t.startswith("cannot re-measure 't_nowhere'") for t in source.told)


def test_observation_verdicts(tmp_path: Path, store: Store) -> None:
    verdicts = []
    for session_id, outcome in (("s1", "no"), ("s2", "y")):  # "no" is what a healthy circuit shows
        source = Scripted([Answer("12.4"), Answer(outcome)])
        record = Session.begin(store, fake_engine(tmp_path), source, session_id=session_id).run(source)
        verdicts += [(s.reading_text, s.verdict) for s in record.steps if s.test_id == "t_look"]
    assert verdicts == [("no", "in range"), ("yes", "not as expected")]


def test_quit_then_resume_carries_on_from_the_same_state(tmp_path: Path, store: Store) -> None:
    engine = fake_engine(tmp_path)
    first = Scripted([Answer("12.4"), Quit()])
    record = Session.begin(store, engine, first, session_id="s1").run(first)
    assert record.status == "open" and kinds(record) == ["start", "rule", "reading"]

    resumed = Session.resume(store, "s1", lambda rec: engine)
    assert resumed.recap() == ["2. t_volts: 12.4 V (in range)"]
    second = Scripted([Answer("yes")], Closing("ground cleaned", Answer("12.6 V")))
    record = resumed.run(second)
    assert second.asked == ["t_look"]  # t_volts is not asked again
    assert record.diagnosis == "gnd.high_resistance" and record.status == "closed"
    assert [s.index for s in record.steps] == list(range(len(record.steps)))


def test_resume_by_unique_prefix_and_unknown_ids(tmp_path: Path, store: Store) -> None:
    engine = fake_engine(tmp_path)
    source = Scripted([Quit()])
    Session.begin(store, engine, source, session_id="20261201-aaaa").run(source)
    assert Session.resume(store, "20261201-a", lambda rec: engine).id == "20261201-aaaa"
    with pytest.raises(SessionError, match="no session 'nope'"):
        Session.resume(store, "nope", lambda rec: engine)


def test_a_concluded_session_resumes_at_the_repair(tmp_path: Path, store: Store) -> None:
    engine = fake_engine(tmp_path)
    first = Scripted([Answer("4.0")], closing=None)
    assert Session.begin(store, engine, first, session_id="s1").run(first).status == "concluded"
    later = Scripted([], Closing("lamp replaced", Answer("12.5")))
    record = Session.resume(store, "s1", lambda rec: engine).run(later)
    assert later.asked == [] and record.status == "closed"
    assert kinds(record)[-3:] == ["repair", "verification", "close"]
    with pytest.raises(SessionError, match="is closed"):
        Session.resume(store, "s1", lambda rec: engine)


def test_unknown_complaint_is_refused_before_anything_is_stored(tmp_path: Path, store: Store) -> None:
    source = Scripted([], intake=Intake(complaint="smoke"))
    with pytest.raises(SessionError, match="unknown complaint 'smoke'"):
        Session.begin(store, fake_engine(tmp_path), source, session_id="s1")
    assert store.list() == []


def test_summary_json_shape(tmp_path: Path, store: Store) -> None:
    source = Scripted([Skip(), Answer("yes")])
    record = Session.begin(store, fake_engine(tmp_path), source, session_id="s1").run(source)
    data = summary_json(record)
    assert set(data) == {"session", "ruleset", "status", "diagnosis", "probability", "ambiguity_group",
                         "group_probability", "steps", "stopped_because"}
    assert data["session"] == "s1" and data["ruleset"] == "fake"
    assert data["steps"][0] == {"test": "t_volts", "kind": "skip", "reading": None, "unit": None,
                                "top": [["gnd.high_resistance", 0.5], ["lamp.open", 0.4], ["none", 0.1]]}
    assert data["steps"][1]["reading"] == "yes"
