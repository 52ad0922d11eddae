"""Reading the repair-history CSV: the documented header, and located errors with the row."""

from __future__ import annotations

import datetime as dt
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from assistant.errors import HistoryError
from assistant.history import HEADER, read_history, repairs_from_sessions
from assistant.record import SessionRecord, VehicleInfo

KNOWN = {"stop_lamps", "starter"}


def _csv(tmp_path: Path, text: str | bytes) -> Path:
    path = tmp_path / "history.csv"
    path.write_bytes(text if isinstance(text, bytes) else text.encode("utf-8"))
    return path


def test_reads_fault_ids_and_component_mode_pairs(tmp_path: Path) -> None:
    path = _csv(tmp_path, HEADER + "\n"
                "2026-03-14,CV2-017,stop_lamps,lamp_left.filament_open,,,182400\n"
                "\n"  # blank rows are skipped
                "2026-04-02, CV2-009 ,stop_lamps,,g_rear,high_resistance,\n"
                "2026-04-09,CV2-003,starter,none,,,\n")
    repairs = read_history(path, KNOWN)
    assert [(r.fault_id, r.vehicle, r.odometer_km) for r in repairs] == [
        ("lamp_left.filament_open", "CV2-017", 182400.0),
        ("g_rear.high_resistance", "CV2-009", None),
        ("none", "CV2-003", None),
    ]
    assert repairs[0].date == dt.date(2026, 3, 14)
    assert repairs[1].source == f"{path}:4"


def test_columns_in_any_order_any_case_and_extra_columns(tmp_path: Path) -> None:
    path = _csv(tmp_path, "\ufeffRuleset, Fault ,Date,Vehicle,Technician\n"
                "stop_lamps,f12.blown,2026-01-05,CV2-001,Jo\n")
    (repair,) = read_history(path, KNOWN)
    assert (repair.ruleset_id, repair.fault_id, repair.vehicle) == ("stop_lamps", "f12.blown", "CV2-001")


@pytest.mark.parametrize("text, row, column, needle", [
    # (file content, row in the error, column, part of the message)
    ("date,vehicle,fault\n2026-01-01,CV2-1,f12.blown\n", 1, None, "lacks column ruleset"),
    ("date,vehicle,ruleset,component\n", 1, None, "fault (or component and mode)"),
    (HEADER + "\n2026-01-01,CV2-1,stop_lamps,f12.blown,,,\n2026-02-30,CV2-2,stop_lamps,f12.blown,,,\n",
     3, 1, "'2026-02-30' is not a date"),
    (HEADER + "\n14/03/2026,CV2-1,stop_lamps,f12.blown,,,\n", 2, 1, "write YYYY-MM-DD"),
    (HEADER + "\n2026-01-01,CV2-1,stop_lamp,f12.blown,,,\n", 2, 3, "unknown ruleset 'stop_lamp'"),
    (HEADER + "\n2026-01-01,,stop_lamps,f12.blown,,,\n", 2, 2, "the vehicle is empty"),
    (HEADER + "\n2026-01-01,CV2-1,stop_lamps,,f12,,\n", 2, 4, "no fault given"),
    (HEADER + "\n2026-01-01,CV2-1,stop_lamps,f12.blown,,,12k\n", 2, 7, "odometer '12k'"),
    ("date,vehicle,ruleset,fault,date\n", 1, 5, "column 'date' appears twice"),
    ("", 1, None, "is empty"),
    ("  \n\n", 1, None, "is empty"),
])
def test_bad_rows_are_located(tmp_path: Path, text: str, row: int, column: int | None, needle: str) -> None:
    path = _csv(tmp_path, text)
    with pytest.raises(HistoryError) as info:
        read_history(path, KNOWN)
    err = info.value
    assert (err.file, err.line, err.column) == (str(path), row, column)
    assert needle in str(err)
    assert str(err).startswith(f"{path}:{row}")


def test_non_utf8_byte_names_its_row(tmp_path: Path) -> None:
    # "Müller" in Latin-1 on row 3
    data = (HEADER + "\n2026-01-01,CV2-1,stop_lamps,f12.blown,,,\n").encode() + \
        "2026-01-02,M\xfcller,stop_lamps,f12.blown,,,\n".encode("latin-1")
    path = _csv(tmp_path, data)
    with pytest.raises(HistoryError, match=r"not UTF-8 text \(byte 0xfc\)") as info:
        read_history(path, KNOWN)
    assert info.value.line == 3


def test_missing_file_and_binary_file(tmp_path: Path) -> None:
    with pytest.raises(HistoryError, match="no such file"):
        read_history(tmp_path / "none.csv", KNOWN)
    with pytest.raises(HistoryError, match="binary"):
        read_history(_csv(tmp_path, b"date\x00vehicle"), KNOWN)


def _record(status: str, diagnosis: str | None, repair: str | None, source: str | None = "prompt") -> SessionRecord:
    return SessionRecord(id=f"s-{status}-{diagnosis}", ruleset_id="stop_lamps", ruleset_version="1.0.0",
                         ruleset_sha256="0" * 64, started="2026-05-01T08:00:00Z", finished="2026-05-01T09:10:00Z",
                         status=status, diagnosis=diagnosis, repair=repair,  # type: ignore[arg-type]
                         vehicle=VehicleInfo(fleet_number="CV2-044", odometer_km=90500), source=source)


def test_closed_sessions_with_a_repair_count() -> None:
    records = [
        _record("closed", "g_rear.high_resistance", "Cleaned and refitted G30"),
        _record("concluded", "f12.blown", "Replaced F12"),  # not closed yet
        _record("closed", None, None),  # closed without a diagnosis
        _record("abandoned", "lamp_left.filament_open", None),
    ]
    (repair,) = repairs_from_sessions(records)
    assert (repair.fault_id, repair.vehicle, repair.date, repair.odometer_km) == (
        "g_rear.high_resistance", "CV2-044", dt.date(2026, 5, 1), 90500)
    assert repair.source == "session s-closed-g_rear.high_resistance"


def test_simulated_sessions_are_no_repairs() -> None:
    records = [_record("closed", "lamp_left.filament_open", "Replaced the left lamp", "simulate lamp_left.filament_open seed 7"),
               _record("closed", "g_rear.high_resistance", "Cleaned and refitted G30", "answers bench.yaml")]
    assert [r.fault_id for r in repairs_from_sessions(records)] == ["g_rear.high_resistance"]


def test_closed_sessions_are_read_from_the_store(tmp_path: Path) -> None:
    from assistant.history import repairs_from_store
    from assistant.store import open_store

    url = f"sqlite:///{tmp_path / 'sessions.db'}"
    with open_store(url) as db:
        for record in (_record("closed", "g_rear.high_resistance", "Cleaned and refitted G30"),
                       _record("concluded", "f12.blown", "Replaced F12")):
            db.create(record)
    (repair,) = repairs_from_store(url)
    assert repair.fault_id == "g_rear.high_resistance" and repair.vehicle == "CV2-044"


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(data=st.one_of(
    st.binary(max_size=300),
    st.text(alphabet=st.sampled_from(list("date,vehicle,ruleset,fault\n\"-0129 .x\r")), max_size=300)
    .map(lambda t: (HEADER + "\n" + t).encode("utf-8")),
))
def test_any_bytes_give_repairs_or_a_located_history_error(tmp_path: Path, data: bytes) -> None:
    # a file of any content is read or refused with a HistoryError at a row, never another exception
    path = _csv(tmp_path, data)
    try:
        repairs = read_history(path, KNOWN)
    except HistoryError as err:
        assert err.file == str(path) and (err.line is None or err.line >= 1)
    else:
        assert all(r.ruleset_id in KNOWN and r.vehicle for r in repairs)
