"""The real prompt-toolkit prompt, driven through a pipe (no terminal), on a stand-in engine."""

from __future__ import annotations

import threading
import time
from collections.abc import Iterator
from pathlib import Path

import pytest
from prompt_toolkit.completion import CompleteEvent
from prompt_toolkit.document import Document
from prompt_toolkit.input import create_pipe_input
from prompt_toolkit.output import DummyOutput

from assistant.errors import SessionError
from assistant.prompt import PromptSource, completer_for
from assistant.record import SessionRecord
from assistant.session import Engine, Session
from assistant.store import Store, open_store
from tests.conftest import STOP_LAMPS
from tests.fake_engine import FakeProposal, fake_engine

INTAKE = "VIN123\nCV2-07\n112000 mi\n2021\nT. Tester\n1\nB1234 U0100\n"
CTRL_C, CTRL_D = "\x03", "\x04"


@pytest.fixture()
def store(tmp_path: Path) -> Iterator[Store]:
    with open_store(f"sqlite:///{tmp_path / 's.db'}") as s:
        yield s


def run(engine: Engine, store: Store, typed: str, *, session_id: str = "p1",
        resume: bool = False) -> tuple[SessionRecord, list[str]]:
    """Type ``typed`` into the real prompt; the record and every line the technician saw."""
    shown: list[str] = []
    with create_pipe_input() as pipe:
        pipe.send_text(typed)
        pipe.close()  # past the end of what was typed, the prompt sees end of input (as Ctrl-D)
        source = PromptSource(engine.loaded.ruleset, input=pipe, output=DummyOutput(), write=shown.append)
        if resume:
            session = Session.resume(store, session_id, lambda record: engine)
        else:
            session = Session.begin(store, engine, source, session_id=session_id)
        return session.run(source), shown


def test_a_session_at_the_prompt(tmp_path: Path, store: Store) -> None:
    # Enter at the repair prompt accepts the repair offered; then the verification reading.
    record, shown = run(fake_engine(tmp_path), store, INTAKE + "4.1 V\n\n12.5\n")
    text = "\n".join(shown)
    assert record.status == "closed" and record.diagnosis == "lamp.open"
    assert record.vehicle.vin == "VIN123" and record.vehicle.fleet_number == "CV2-07"
    assert record.vehicle.odometer_km == pytest.approx(112000 * 1.609344, abs=0.1)  # mile: 1.609344 km exactly
    assert record.vehicle.model_year == 2021 and record.technician == "T. Tester"
    assert record.complaint == "dim" and record.fault_codes == ("B1234", "U0100")
    assert record.repair == "repair lamp.open" and record.verification == "t_volts: 12.5 (in range)"
    assert "-- Test 1: t_volts [t_volts] --" in text and "Healthy: 11.5 V to 12.7 V" in text
    assert "  ! careful" in text  # the cautions are on the page
    assert "recorded t_volts: 4.1 V (low); leading suspect lamp.open 97%" in text
    assert "Diagnosis: lamp.open" in text and "-- Verification: t_volts [t_volts] --" in text


def test_commands_at_the_prompt(tmp_path: Path, store: Store) -> None:
    typed = INTAKE + "why\nsuspects\nhelp\nnote  holder contacts green \nnote\n12.4\nskip\n"
    record, shown = run(fake_engine(tmp_path), store, typed)
    text = "\n".join(shown)
    assert "why: it splits" in text
    assert " 50.0%  gnd.high_resistance" in text  # the suspects table
    assert "remeasure  remeasure TEST: take a test again" in text  # the help
    assert "not taken: a note needs text" in text
    kinds = [s.kind for s in record.steps]
    assert kinds[2:] == ["note", "reading", "skip", "conclusion"]
    assert record.steps[2].note == "holder contacts green"


def test_undo_and_remeasure_at_the_prompt(tmp_path: Path, store: Store) -> None:
    typed = INTAKE + "12.4\nundo\n12.3\nremeasure t_nope\nremeasure\nremeasure t_volts\n12.2\nquit\n"
    record, shown = run(fake_engine(tmp_path), store, typed)
    text = "\n".join(shown)
    assert "took back t_volts: 12.4" in text
    assert "not taken: remeasure needs a test id, one of: t_volts, t_look" in text
    assert "[t_volts] (again) --" in text
    readings = [(s.kind, s.reading) for s in record.steps if s.kind in ("reading", "undo", "remeasure")]
    assert readings == [("reading", 12.4), ("undo", None), ("reading", 12.3), ("remeasure", None),
                        ("reading", 12.2)]
    assert record.status == "open"


@pytest.mark.parametrize(
    ("typed", "says"),
    [
        ("frobnicate\n", "unknown command 'frobnicate'; type help"),  # an unknown command
        ("12 ohm\n", "'12 ohm' is not a voltage"),  # the wrong dimension
        ("12.4.5\n", "'12.4.5' is not a voltage"),  # garbage
        ("\n", "Type the reading, or help for the commands."),  # nothing
        ("45\n", "above any voltage this circuit can show"),  # the engine refuses it
        (CTRL_C, "Ctrl-C: nothing is lost"),
    ],
)
def test_bad_input_is_refused_and_asked_again(tmp_path: Path, store: Store, typed: str, says: str) -> None:
    record, shown = run(fake_engine(tmp_path), store, INTAKE + typed + "quit\n")
    assert any(says in line and "\n" not in line for line in shown), shown
    assert [s.kind for s in record.steps] == ["start", "rule"]  # nothing recorded for it
    assert record.status == "open"


def test_ctrl_d_leaves_the_session_open_and_resume_shows_the_answers(tmp_path: Path, store: Store) -> None:
    engine = fake_engine(tmp_path)
    record, shown = run(engine, store, INTAKE + "12.4\n" + CTRL_D)
    assert record.status == "open" and "Ctrl-D: the session is saved" in shown[-1]
    resumed = Session.resume(store, "p1", lambda rec: engine)
    assert resumed.recap() == ["2. t_volts: 12.4 V (in range)"]
    record, shown = run(engine, store, "yes\n\n12.6\n", resume=True)
    assert record.status == "closed" and record.diagnosis == "gnd.high_resistance"
    assert shown[0].startswith("-- Test 2: t_look")  # carries on with the next test, not the first


def test_ctrl_d_in_the_intake_saves_nothing(tmp_path: Path, store: Store) -> None:
    with pytest.raises(SessionError, match="nothing was saved"):
        run(fake_engine(tmp_path), store, "VIN123\n" + CTRL_D)
    assert store.list() == []


def test_bad_intake_fields_are_asked_again(tmp_path: Path, store: Store) -> None:
    typed = "\n\nlots\n-5\n112000\nlast year\n1900\n2021\n\n7\nsmoke\n\n\nquit\n"
    record, shown = run(fake_engine(tmp_path), store, typed)
    text = "\n".join(shown)
    assert "not taken: 'lots' is not a distance" in text and "not taken: '-5' is not a distance" in text
    assert "'last year' is not a model year" in text and "'1900' is not a model year" in text
    assert "'7' is not one of 1-1 or dim" in text and "'smoke' is not one of" in text
    assert record.vehicle.odometer_km == 112000 and record.vehicle.model_year == 2021
    assert record.complaint is None and record.vehicle.vin is None


def test_ctrl_d_at_the_repair_leaves_it_concluded(tmp_path: Path, store: Store) -> None:
    record, shown = run(fake_engine(tmp_path), store, INTAKE + "4.0\n" + CTRL_D)
    assert record.status == "concluded" and record.repair == "repair lamp.open"  # the repair named, not done
    assert not any(s.kind == "repair" for s in record.steps)


def test_tab_completes_commands_and_test_ids(tmp_path: Path, store: Store) -> None:
    # Completion runs in the background: give it a moment after each Tab, as a person would.
    engine = fake_engine(tmp_path)
    chunks = [INTAKE + "12.4\nremeasure t_v", "\t", "\n12.1\nqu", "\t", "\n"]
    with create_pipe_input() as pipe:
        def feed() -> None:
            for chunk in chunks:
                pipe.send_text(chunk)
                time.sleep(0.5 if chunk == "\t" else 0.2)
            pipe.close()

        typist = threading.Thread(target=feed)
        typist.start()
        source = PromptSource(engine.loaded.ruleset, input=pipe, output=DummyOutput(), write=lambda t: None)
        record = Session.begin(store, engine, source, session_id="p1").run(source)
        typist.join()
    assert [s.test_id for s in record.steps if s.kind == "remeasure"] == ["t_volts"]
    assert record.status == "open"  # "qu" + Tab completed to quit


def test_completer_offers(tmp_path: Path) -> None:
    engine = fake_engine(tmp_path)
    from tests.fake_engine import FakeDiagnosis

    question = engine.pages.question(FakeProposal("t_look"), FakeDiagnosis(), 0)
    completer = completer_for(question)

    def offers(text: str) -> list[str]:
        return [c.text for c in completer.get_completions(Document(text), CompleteEvent())]

    assert offers("re") == ["remeasure"]
    assert offers("remeasure t_") == ["t_volts", "t_look"]
    assert "yes" in offers("y") and "suspects" in offers("s")


def test_toolbar_shows_three_leading_suspects(tmp_path: Path) -> None:
    engine = fake_engine(tmp_path)
    from tests.fake_engine import FakeDiagnosis

    question = engine.pages.question(FakeProposal("t_volts"), FakeDiagnosis(), 0)
    with create_pipe_input() as pipe:
        pipe.send_text("quit\n")
        pipe.close()
        source = PromptSource(engine.loaded.ruleset, input=pipe, output=DummyOutput(), write=lambda t: None)
        source.ask(question)
        assert source.toolbar().startswith(" Suspects: gnd.high_resistance 50%  lamp.open 40%  none 10%")


# --------------------------------------------------------------------------- on the real engine


@pytest.fixture(scope="module")
def stop_lamps_engine() -> Engine:
    from assistant.ruleset.load import load_ruleset

    return Engine.build(load_ruleset(STOP_LAMPS))


def test_the_real_engine_at_the_prompt(stop_lamps_engine: Engine, store: Store) -> None:
    # Intake: five empty fields, complaint 3 (left_dim), no fault codes; then the first test.
    typed = "\n" * 5 + "3\n\n" + "why\nsuspects\nleft_dim\nquit\n"
    record, shown = run(stop_lamps_engine, store, typed)
    text = "\n".join(shown)
    first = next(s for s in record.steps if s.kind == "reading")
    assert (first.test_id, first.reading_text) == ("look_lamps", "left_dim"), "the planner's first test changed"
    assert "look_lamps: " in text and " bits for 1 min" in text  # why: the planner's numbers
    assert "separates " in text
    assert "lamp_left.high_resistance" in text  # the suspects table
    assert "Answer: all_bright / all_dim" in text and "! Follow the vehicle maker's procedures" in text
    assert record.complaint == "left_dim" and record.status == "open"
    assert first.verdict == "not as expected" and first.top[0][0] == "lamp_left.high_resistance"


def test_choose_ruleset_by_family(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    from assistant.catalogue import catalogue
    from assistant.prompt import choose_ruleset

    shop = tmp_path / "shop"
    shop.mkdir()
    (shop / "cv2_stop.yaml").write_text(STOP_LAMPS.read_text(encoding="utf-8").replace(
        "id: stop_lamps", "id: cv2_stop_lamps", 1), encoding="utf-8")
    (shop / "broken.yaml").write_text("format: 1\nid: [\n", encoding="utf-8")  # left out, with a warning
    monkeypatch.setenv("OHMTRAIL_RULESETS", str(shop))
    monkeypatch.setenv("XDG_CONFIG_HOME", str(tmp_path / "config"))
    entries = catalogue()
    assert [e.family for e in entries] == sorted(e.family for e in entries)
    assert {"cv2_stop_lamps", "stop_lamps", "starter"} <= {e.id for e in entries}
    shown: list[str] = []
    with create_pipe_input() as pipe:
        pipe.send_text("99\nnope\ncv2_stop_lamps\n")
        pipe.close()
        chosen = choose_ruleset(entries, input=pipe, output=DummyOutput(), write=shown.append)
    assert chosen.id == "cv2_stop_lamps" and chosen.origin == "configured"
    assert "lamp" in shown and any("[cv2_stop_lamps 1.0.0] (shop)" in line for line in shown)
    assert sum("not taken:" in line for line in shown) == 2
    with create_pipe_input() as pipe:
        pipe.send_text("2\n")
        pipe.close()
        assert choose_ruleset(entries, input=pipe, output=DummyOutput(), write=shown.append) == entries[1]
    with create_pipe_input() as pipe, pytest.raises(SessionError, match="no ruleset chosen"):
        pipe.send_text(CTRL_D)
        choose_ruleset(entries, input=pipe, output=DummyOutput(), write=shown.append)
