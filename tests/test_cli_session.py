"""The session commands: diagnose, sessions, resume; one-line errors that lose nothing."""

from __future__ import annotations

import json
import os
import sqlite3
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest

from assistant.cli import main
from assistant.ruleset.load import load_ruleset
from assistant.session import Engine, Session
from assistant.sources import Quit, SimulatedSource
from assistant.store import open_store
from tests.conftest import ROOT, STOP_LAMPS

EXAMPLES = ROOT / "docs" / "examples"  # the files docs/sessions.md shows; these tests keep them true


def run(capsys: pytest.CaptureFixture[str], *argv: str) -> tuple[int, str, str]:
    code = main(list(argv))
    out, err = capsys.readouterr()
    return code, out, err


@pytest.fixture()
def db(tmp_path: Path) -> str:
    return f"sqlite:///{tmp_path / 'sessions.db'}"


@pytest.fixture()
def answers() -> Path:
    return EXAMPLES / "courier-van-answers.yaml"


def test_diagnose_with_answers_json_and_sessions(capsys: pytest.CaptureFixture[str], db: str, answers: Path) -> None:
    code, out, err = run(capsys, "diagnose", str(STOP_LAMPS), "--answers", str(answers), "--json", "--db", db,
                         "--id", "cv2-07-left")
    assert code == 0, err
    data = json.loads(out)
    assert data["session"] == "cv2-07-left" and data["ruleset"] == "stop_lamps"
    assert data["diagnosis"] == "w_left_gnd.high_resistance" and data["probability"] >= 0.95
    assert data["stopped_because"] == "threshold reached" and data["status"] == "closed"
    taken = [(s["test"], s["reading"], s["unit"]) for s in data["steps"] if s["kind"] == "reading"]
    assert ("drop_left_ground", 3.1, "V") in taken
    assert all(len(s["top"]) == 3 and s["top"][0][1] >= s["top"][1][1] for s in data["steps"])

    code, out, _ = run(capsys, "sessions", "--json", "--db", db)
    listed = json.loads(out)
    assert [s["id"] for s in listed] == ["cv2-07-left"]
    assert listed[0]["status"] == "closed" and listed[0]["vehicle"]["fleet_number"] == "CV2-07"
    kinds = [s["kind"] for s in listed[0]["steps"]]
    assert kinds[0] == "start" and kinds[-3:] == ["repair", "verification", "close"]
    assert listed[0]["step_count"] == len(listed[0]["steps"])

    code, out, _ = run(capsys, "sessions", "--db", db)
    assert code == 0 and out.splitlines()[0].split() == ["ID", "STARTED", "STATUS", "STEPS", "RULESET", "VEHICLE",
                                                         "DIAGNOSIS"]
    assert "cv2-07-left" in out and "w_left_gnd.high_resistance" in out


def test_diagnose_narrates_the_conversation(capsys: pytest.CaptureFixture[str], db: str, answers: Path) -> None:
    code, out, _ = run(capsys, "diagnose", str(STOP_LAMPS), "--answers", str(answers), "--db", db, "--id", "n1")
    assert code == 0
    assert "Complaint: Left stop lamp is dim; the others are bright" in out
    assert "Meter: DC volts" in out and "red lead: V/ohm jack" in out
    assert "! Hybrid and electric vehicles" in out  # the cautions on every page
    assert "> 3.1 V" in out and "Diagnosis: w_left_gnd.high_resistance" in out
    assert "Session n1 closed" in out and db.removeprefix("sqlite:///") in out


def test_demo_scenario_context(capsys: pytest.CaptureFixture[str], db: str) -> None:
    code, out, err = run(capsys, "diagnose", str(STOP_LAMPS), "--simulate", "lamp_left.high_resistance", "--seed",
                         "7", "--context", str(EXAMPLES / "courier-van-left-dim.yaml"), "--db", db, "--id", "demo")
    assert code == 0, err
    assert "Complaint: Left stop lamp is dim" in out and "Technician: Sam Ortega" in out
    assert "note: Driver reports the left stop lamp weak at dusk" in out
    assert "Diagnosis: lamp_left.high_resistance" in out and "> repair done:" in out
    with open_store(db) as store:
        record = store.load("demo")
    assert record.status == "closed" and record.vehicle.fleet_number == "CV2-07"
    assert record.source == "simulate lamp_left.high_resistance seed 7"


@pytest.mark.parametrize("fault", ["lamp_left.filament_open", "g_rear.high_resistance", "f12.blown"])
def test_diagnose_simulated(capsys: pytest.CaptureFixture[str], db: str, fault: str) -> None:
    code, out, err = run(capsys, "diagnose", str(STOP_LAMPS), "--simulate", fault, "--seed", "3", "--json",
                         "--db", db)
    assert code == 0, err
    data = json.loads(out)
    assert data["diagnosis"] == fault or fault in data["ambiguity_group"]


def test_the_simulated_vehicle_is_not_one_of_the_engines_samples(
        capsys: pytest.CaptureFixture[str], db: str, monkeypatch: pytest.MonkeyPatch) -> None:
    """`diagnose --simulate` draws the vehicle from the second Monte Carlo run (vehicle_table),
    with the engine's meter and sample count, as `ohmtrail simulate` does."""
    import assistant.sources
    from assistant.predict import predict
    from assistant.simulate import VEHICLE_SEED_OFFSET

    tables = []
    real = assistant.sources.SimulatedSource

    def capture(table, *args, **kwargs):  # type: ignore[no-untyped-def]
        tables.append(table)
        return real(table, *args, **kwargs)

    monkeypatch.setattr(assistant.sources, "SimulatedSource", capture)
    code, _, err = run(capsys, "diagnose", str(STOP_LAMPS), "--simulate", "f12.blown", "--json", "--db", db)
    assert code == 0, err
    loaded = load_ruleset(STOP_LAMPS)
    drawn, own = tables[0].samples, predict(loaded).samples
    assert drawn.shape == own.shape and not np.array_equal(np.nan_to_num(drawn), np.nan_to_num(own))
    np.testing.assert_array_equal(drawn, predict(loaded, seed=VEHICLE_SEED_OFFSET).samples)


def test_same_seed_same_session(capsys: pytest.CaptureFixture[str], db: str) -> None:
    runs = []
    for _ in range(2):
        code, out, _ = run(capsys, "diagnose", str(STOP_LAMPS), "--simulate", "c40.high_resistance", "--seed", "11",
                           "--json", "--db", db)
        runs.append([(s["test"], s["reading"]) for s in json.loads(out)["steps"]])
    assert runs[0] == runs[1]


class QuitsAfter:
    """The simulator for the first ``n`` questions, then the technician quits."""

    def __init__(self, inner: SimulatedSource, n: int) -> None:
        self.inner, self.n, self.label = inner, n, inner.label

    def __getattr__(self, name: str) -> object:
        return getattr(self.inner, name)

    def ask(self, question: object) -> object:
        self.n -= 1
        return self.inner.ask(question) if self.n >= 0 else Quit()  # type: ignore[arg-type]


def test_resume_carries_on_and_keeps_what_was_there(capsys: pytest.CaptureFixture[str], db: str) -> None:
    engine = Engine.build(load_ruleset(STOP_LAMPS))
    source = QuitsAfter(SimulatedSource(engine.table, "w_left_gnd.high_resistance", seed=5), 1)
    with open_store(db) as store:
        record = Session.begin(store, engine, source, session_id="r1").run(source)  # type: ignore[arg-type]
    assert record.status == "open" and [s.kind for s in record.steps].count("reading") == 1
    code, out, err = run(capsys, "resume", "r1", "--simulate", "w_left_gnd.high_resistance", "--db", db)
    assert code == 0, err
    lines = out.splitlines()
    assert lines[0].startswith("Resuming session r1")
    readings = [s for s in record.steps if s.kind == "reading"]
    for step in readings:  # the answer so far is shown
        assert any(line.strip().startswith(f"{step.index}. {step.test_id}: ") for line in lines[1:6])
    with open_store(db) as store:
        after = store.load("r1")
    assert after.steps[: len(record.steps)] == record.steps  # nothing already recorded changed
    assert after.status == "closed" and after.diagnosis == "w_left_gnd.high_resistance"


def test_a_conflicting_reading_is_pointed_out(capsys: pytest.CaptureFixture[str], db: str, tmp_path: Path) -> None:
    # All lamps bright, yet 0.2 V after the fuse: no single fault explains both.
    path = tmp_path / "conflict.yaml"
    path.write_text("complaint: left_dim\nreadings:\n  look_lamps: all_bright\n  v_fuse: 0.2 V\n", encoding="utf-8")
    code, out, _ = run(capsys, "diagnose", str(STOP_LAMPS), "--answers", str(path), "--db", db)
    assert code == 0
    assert any("no fault explains every reading" in line and line.endswith("(type remeasure v_fuse, or undo)")
               for line in out.splitlines())


def test_resume_uses_the_sessions_meter_profile(capsys: pytest.CaptureFixture[str], db: str,
                                                tmp_path: Path) -> None:
    from assistant.meter import load_meter_profile

    meter_file = tmp_path / "meter.yaml"
    meter_file.write_text((ROOT / "assistant" / "data" / "meter_default.yaml").read_text(encoding="utf-8"),
                          encoding="utf-8")
    engine = Engine.build(load_ruleset(STOP_LAMPS), load_meter_profile(meter_file))
    source = QuitsAfter(SimulatedSource(engine.table, "c40.open", seed=2), 1)
    with open_store(db) as store:
        Session.begin(store, engine, source, session_id="m1", meter_name=str(meter_file)).run(source)  # type: ignore[arg-type]
    meter_file.unlink()  # resume must look for the session's own meter profile, and say it is gone
    code, _, err = run(capsys, "resume", "m1", "--simulate", "c40.open", "--db", db)
    assert code == 1 and str(meter_file) in err and err.count("\n") == 1


@pytest.mark.parametrize(
    ("argv", "says"),
    [
        (["resume", "nope"], "no session 'nope'"),
        (["diagnose", "--simulate", "none"], "--answers and --simulate need a RULESET"),
        (["diagnose", str(STOP_LAMPS), "--simulate", "lamp_left.melted"], "unknown fault 'lamp_left.melted'"),
        (["diagnose", str(STOP_LAMPS), "--context", "x.yaml"], "--context gives the vehicle"),
        (["diagnose", str(STOP_LAMPS), "--answers", "no-such-file.yaml"], "no-such-file.yaml: no such file"),
    ],
)
def test_mistakes_are_one_line(capsys: pytest.CaptureFixture[str], db: str, argv: list[str], says: str) -> None:
    code, out, err = run(capsys, *argv, "--db", db)
    assert code == 1 and says in err and err.count("\n") == 1 and "Traceback" not in err


def test_answers_file_with_an_unknown_test_is_located(capsys: pytest.CaptureFixture[str], db: str,
                                                      tmp_path: Path) -> None:
    path = tmp_path / "a.yaml"
    path.write_text("readings:\n  v_left_feed: 12.1\n  v_tail_lamp: 12\n", encoding="utf-8")
    code, _, err = run(capsys, "diagnose", str(STOP_LAMPS), "--answers", str(path), "--db", db)
    assert code == 1 and err.startswith(f"{path}:3:3: unknown test 'v_tail_lamp'")
    with open_store(db) as store:
        assert store.list() == []  # refused before anything was stored


def test_store_that_is_not_a_database(capsys: pytest.CaptureFixture[str], tmp_path: Path, answers: Path) -> None:
    path = tmp_path / "notes.txt"
    path.write_text("shopping list\n" * 100, encoding="utf-8")
    code, _, err = run(capsys, "sessions", "--db", str(path))
    assert code == 1 and "is not a database" in err and err.count("\n") == 1
    assert path.read_text(encoding="utf-8") == "shopping list\n" * 100


def test_locked_store_loses_nothing(capsys: pytest.CaptureFixture[str], db: str, answers: Path) -> None:
    code, _, _ = run(capsys, "diagnose", str(STOP_LAMPS), "--answers", str(answers), "--json", "--db", db,
                     "--id", "k1")
    with open_store(db) as store:
        before = store.load("k1")
    holder = sqlite3.connect(db.removeprefix("sqlite:///"))
    holder.execute("BEGIN EXCLUSIVE")  # another program holds the file
    try:
        code, _, err = run(capsys, "diagnose", str(STOP_LAMPS), "--answers", str(answers), "--db", db)
    finally:
        holder.rollback()
        holder.close()
    assert code == 1 and "is locked by another program" in err and err.count("\n") == 1
    with open_store(db) as store:
        assert store.load("k1") == before and len(store.list()) == 1


def test_prompt_needs_a_terminal(tmp_path: Path) -> None:
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    proc = subprocess.run([sys.executable, "-m", "assistant.cli", "diagnose", str(STOP_LAMPS), "--db",
                           f"sqlite:///{tmp_path / 's.db'}"], stdin=subprocess.DEVNULL, capture_output=True,
                          text=True, env=env, cwd=ROOT, timeout=300)
    assert proc.returncode == 1
    assert proc.stderr == ("ohmtrail: the interactive prompt needs a terminal; give --answers FILE or "
                           "--simulate FAULT_ID\n")
