"""A session run by the session engine, stored and loaded, then drawn, reported and exported.

The readings come from the simulator on the bundled stop-lamp ruleset (the Larkspur CV-2 van,
our own invented vehicle) under a corroded left lamp ground; this checks that the digests the
session seals its steps with are the ones the export verifies.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from assistant.cli import main
from assistant.export import check_record, verify_export
from assistant.predict import predict
from assistant.record import SessionRecord, VehicleInfo
from assistant.report import write_outputs
from assistant.ruleset import load_ruleset
from assistant.session import Engine, Session
from assistant.sources import Intake, SimulatedSource
from assistant.store import open_store

STOP_LAMPS = Path(__file__).parent.parent / "rulesets" / "lamp" / "stop_lamps.yaml"


@pytest.fixture(scope="module")
def stored(tmp_path_factory: pytest.TempPathFactory) -> tuple[str, SessionRecord]:
    folder = tmp_path_factory.mktemp("pipeline")
    loaded = load_ruleset(STOP_LAMPS)
    engine = Engine.build(loaded, table=predict(loaded, samples=24, cache=False))
    url = f"sqlite:///{folder / 'sessions.db'}"
    store = open_store(url)
    source = SimulatedSource(engine.table, "w_left_gnd.high_resistance", seed=3, intake=Intake(
        technician="Technician 04 (demo)", complaint="left_dim",
        vehicle=VehicleInfo(fleet_number="CV2-17", odometer_km=182400)))
    record = Session.begin(store, engine, source).run(source)
    return url, store.load(record.id)


def test_the_stored_session_is_sealed_as_export_checks(stored: tuple[str, SessionRecord]) -> None:
    _, record = stored
    assert record.steps and all(s.digest for s in record.steps)
    assert check_record(record).intact


def test_outputs_of_a_real_session(stored: tuple[str, SessionRecord], tmp_path: Path) -> None:
    _, record = stored
    paths = write_outputs(record, tmp_path)
    assert len(paths) == 4 and all(p.stat().st_size > 0 for p in paths)
    assert verify_export(json.loads(paths[3].read_text("utf-8"))).intact
    page = paths[2].read_text("utf-8")
    # names come from the unchanged ruleset file the session recorded
    assert "Voltage drop on the left lamp&#x27;s ground side" in page
    assert "Left stop lamp is dim; the others are bright (left_dim)" in page


def test_verify_of_the_exported_session_and_of_an_edit(stored: tuple[str, SessionRecord],
                                                      tmp_path: Path,
                                                      capsys: pytest.CaptureFixture[str]) -> None:
    url, record = stored
    out = tmp_path / "export.json"
    assert main(["export", record.id[:12], "--db", url, "-o", str(out)]) == 0
    assert main(["verify", str(out)]) == 0
    assert "intact" in capsys.readouterr().out
    data = json.loads(out.read_text("utf-8"))
    first = next(s for s in data["steps"] if s["kind"] == "reading" and s["reading"] is not None)
    first["reading"] += 0.01
    out.write_text(json.dumps(data), encoding="utf-8")
    assert main(["verify", str(out)]) == 1
    assert f"steps[{first['index']}]" in capsys.readouterr().err
