"""The session store: round trips lose nothing, steps are committed in order, failures are one line."""

from __future__ import annotations

import os
import sqlite3
import uuid
from collections.abc import Iterator
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from assistant.errors import SessionError, StoreError
from assistant.record import SessionRecord, Step, VehicleInfo
from assistant.store import open_store, resolve_url

T0 = "2026-12-01T19:00:00+00:00"


def record(session_id: str = "s1", **fields: object) -> SessionRecord:
    base: dict[str, object] = {"id": session_id, "ruleset_id": "stop_lamps", "ruleset_version": "1.0.0",
                               "ruleset_sha256": "ab" * 32, "started": T0}
    return SessionRecord.model_validate({**base, **fields})


def step(index: int, kind: str = "reading", **fields: object) -> Step:
    return Step.model_validate({"index": index, "kind": kind, "at": T0, **fields})


# --------------------------------------------------------------------------- property: nothing lost

texts = st.text(max_size=40)
maybe_text = st.none() | texts
# Floats as stored: any finite value and the infinities (NaN is never equal to itself).
numbers = st.floats(allow_nan=False)
ranking = st.lists(st.tuples(texts, st.floats(0, 1)), max_size=4).map(tuple)


@st.composite
def steps(draw: st.DrawFn, count: int) -> tuple[Step, ...]:
    kinds = ["start", "reading", "skip", "undo", "remeasure", "note", "rule", "conclusion", "repair",
             "verification", "close"]
    out = []
    for i in range(count):
        out.append(Step(
            index=i, kind=draw(st.sampled_from(kinds)), at=draw(texts), test_id=draw(maybe_text),
            reading=draw(st.none() | numbers), reading_text=draw(maybe_text), unit=draw(maybe_text),
            expected_low=draw(st.none() | numbers), expected_high=draw(st.none() | numbers),
            verdict=draw(maybe_text), top=draw(ranking),
            rules_fired=tuple(draw(st.lists(texts, max_size=3))), note=draw(maybe_text),
            refers_to=draw(st.none() | st.integers(0, 50)), digest=draw(maybe_text),
        ))
    return tuple(out)


@st.composite
def sessions(draw: st.DrawFn) -> SessionRecord:
    return SessionRecord(
        id=uuid.uuid4().hex,
        ruleset_id=draw(texts), ruleset_version=draw(texts), ruleset_sha256=draw(texts),
        ruleset_path=draw(maybe_text), source=draw(maybe_text),
        threshold=draw(st.none() | st.floats(0.5, 1)),
        overlays=tuple(draw(st.lists(texts, max_size=2))), meter_profile=draw(texts),
        technician=draw(maybe_text),
        vehicle=VehicleInfo(vin=draw(maybe_text), odometer_km=draw(st.none() | numbers),
                            model_year=draw(st.none() | st.integers(-(2**62), 2**62)),
                            fleet_number=draw(maybe_text)),
        complaint=draw(maybe_text), fault_codes=tuple(draw(st.lists(texts, max_size=3))),
        started=draw(texts), finished=draw(maybe_text),
        status=draw(st.sampled_from(["open", "concluded", "closed", "abandoned"])),
        steps=draw(st.integers(0, 6).flatmap(steps)),
        diagnosis=draw(maybe_text), probability=draw(st.none() | st.floats(0, 1)),
        alternatives=draw(ranking), stopped_because=draw(maybe_text), repair=draw(maybe_text),
        verification=draw(maybe_text), cautions=tuple(draw(st.lists(texts, max_size=3))),
    )


@pytest.fixture(scope="module")
def sqlite_store(tmp_path_factory: pytest.TempPathFactory) -> Iterator[object]:
    store = open_store(f"sqlite:///{tmp_path_factory.mktemp('store') / 'round.db'}")
    yield store
    store.close()


@settings(max_examples=60, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(sessions())
def test_round_trip_loses_nothing(sqlite_store: object, session: SessionRecord) -> None:
    store = sqlite_store
    head, tail = session.model_copy(update={"steps": session.steps[:2]}), session.steps[2:]
    store.create(head)  # type: ignore[attr-defined]
    for s in tail:  # some steps come with create, the rest one at a time
        store.append(session.id, s)  # type: ignore[attr-defined]
    assert store.load(session.id) == session  # type: ignore[attr-defined]


# --------------------------------------------------------------------------- behaviour


@pytest.fixture()
def db(tmp_path: Path) -> str:
    return f"sqlite:///{tmp_path / 'sessions.db'}"


def test_steps_survive_reopening(db: str) -> None:
    with open_store(db) as store:
        store.create(record())
        store.append("s1", step(0, "start"))
        store.append("s1", step(1, test_id="v_fuse", reading=12.4, unit="V", reading_text="12.4"))
    with open_store(db) as again:  # a new process would see the same
        loaded = again.load("s1")
    assert [s.kind for s in loaded.steps] == ["start", "reading"]
    assert loaded.steps[1].reading == 12.4


def test_steps_must_come_in_order(db: str) -> None:
    with open_store(db) as store:
        store.create(record())
        store.append("s1", step(0))
        with pytest.raises(SessionError, match="out of order"):
            store.append("s1", step(0))  # the same index twice
        with pytest.raises(SessionError, match="out of order"):
            store.append("s1", step(2))  # a gap
        assert len(store.load("s1").steps) == 1


def test_unknown_session_is_a_session_error(db: str) -> None:
    with open_store(db) as store:
        for call in (lambda: store.load("nope"), lambda: store.append("nope", step(0)),
                     lambda: store.update("nope", status="closed"), lambda: store.find("nope")):
            with pytest.raises(SessionError, match="no session 'nope'"):
                call()


def test_duplicate_id_is_refused_and_nothing_changes(db: str) -> None:
    with open_store(db) as store:
        store.create(record(technician="first"))
        with pytest.raises(SessionError, match="already exists"):
            store.create(record(technician="second"))
        assert store.load("s1").technician == "first"


def test_update_validates_and_keeps_steps(db: str) -> None:
    with open_store(db) as store:
        store.create(record())
        store.append("s1", step(0, "start"))
        updated = store.update("s1", status="concluded", diagnosis="g_rear.high_resistance",
                               probability=0.97, alternatives=[("none", 0.01)])
        assert updated.status == "concluded" and updated.alternatives == (("none", 0.01),)
        assert len(updated.steps) == 1
        with pytest.raises(SessionError, match="status"):
            store.update("s1", status="half-done")
        with pytest.raises(SessionError, match="cannot be changed"):
            store.update("s1", steps=())
        assert store.load("s1").status == "concluded"


def test_list_summarises_each_session(db: str) -> None:
    with open_store(db) as store:
        store.create(record("b", started="2026-12-01T20:00:00+00:00",
                            vehicle=VehicleInfo(fleet_number="CV2-07", model_year=2021)))
        store.create(record("a", started="2026-12-01T19:00:00+00:00"))
        store.append("b", step(0, "start"))
        store.append("b", step(1))
        summaries = store.list()
    assert [s.id for s in summaries] == ["a", "b"]  # oldest first
    assert [s.steps for s in summaries] == [0, 2]
    assert summaries[1].vehicle == "CV2-07 2021"


def test_find_takes_a_unique_prefix(db: str) -> None:
    with open_store(db) as store:
        store.create(record("20261201-a1"))
        store.create(record("20261201-b2"))
        assert store.find("20261201-a") == "20261201-a1"
        with pytest.raises(SessionError, match="could be any of"):
            store.find("20261201")
        with pytest.raises(SessionError):
            store.find("2026_")  # '_' is not a wildcard


def test_locked_database_is_one_line_and_loses_nothing(tmp_path: Path) -> None:
    path = tmp_path / "sessions.db"
    with open_store(f"sqlite:///{path}", busy_timeout=0.1) as store:
        store.create(record())
        store.append("s1", step(0))
        other = sqlite3.connect(path, timeout=0.1)
        other.execute("BEGIN EXCLUSIVE")  # another program holds the write lock
        try:
            with pytest.raises(StoreError, match="is locked by another program") as caught:
                store.append("s1", step(1))
            assert "\n" not in str(caught.value)
        finally:
            other.rollback()
            other.close()
        store.append("s1", step(1))  # once the lock is gone, the same step goes in
        assert len(store.load("s1").steps) == 2


def test_read_only_database_can_be_read_not_written(tmp_path: Path) -> None:
    path = tmp_path / "sessions.db"
    with open_store(f"sqlite:///{path}") as store:
        store.create(record())
        store.append("s1", step(0))
    with open_store(f"sqlite:///file:{path}?mode=ro&uri=true") as read_only:
        assert len(read_only.load("s1").steps) == 1
        with pytest.raises(StoreError, match="read-only"):
            read_only.append("s1", step(1))
    with open_store(f"sqlite:///{path}") as store:
        assert len(store.load("s1").steps) == 1


@pytest.mark.skipif(os.geteuid() == 0, reason="root writes read-only files; covered by mode=ro above")
def test_read_only_file(tmp_path: Path) -> None:
    path = tmp_path / "sessions.db"
    with open_store(f"sqlite:///{path}") as store:
        store.create(record())
    path.chmod(0o444)
    with open_store(f"sqlite:///{path}") as store, pytest.raises(StoreError, match="read-only"):
        store.append("s1", step(0))


@pytest.mark.parametrize("content", [b"not a database at all\n" * 40, b"\x00" * 4096, b"SQLite format 3\x00junk"])
def test_file_that_is_not_a_database(tmp_path: Path, content: bytes) -> None:
    path = tmp_path / "notes.db"
    path.write_bytes(content)
    with pytest.raises(StoreError, match="is not a database") as caught:
        open_store(str(path))
    assert "\n" not in str(caught.value)
    assert path.read_bytes() == content  # untouched


def test_foreign_tables_are_refused(tmp_path: Path) -> None:
    path = tmp_path / "other.db"
    with sqlite3.connect(path) as conn:
        conn.execute("CREATE TABLE ohmtrail_sessions (x)")
    with pytest.raises(StoreError, match="not written by this program"):
        open_store(str(path))


@pytest.mark.parametrize(
    ("url", "says"),
    [
        ("mysql://host/db", "SQLite or PostgreSQL"),
        ("sqlite:///{tmp}/no/such/folder/s.db", "does not exist"),
        ("sqlite:///{tmp}", "is a folder"),
    ],
)
def test_bad_urls(tmp_path: Path, url: str, says: str) -> None:
    with pytest.raises(StoreError, match=says):
        open_store(url.format(tmp=tmp_path))


def test_url_resolution(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    monkeypatch.delenv("OHMTRAIL_DB", raising=False)
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "data"))
    assert resolve_url(None).database == str(tmp_path / "data" / "ohmtrail" / "sessions.db")
    monkeypatch.setenv("OHMTRAIL_DB", "sqlite:///from-env.db")
    assert resolve_url(None).database == "from-env.db"
    assert resolve_url("plain/file.db").database == "plain/file.db"  # --db wins over the variable
    assert resolve_url("postgresql://u@h/db").drivername == "postgresql+psycopg"
    assert resolve_url("postgres://u@h/db").drivername == "postgresql+psycopg"


def test_default_store_creates_its_folder(monkeypatch: pytest.MonkeyPatch, tmp_path: Path) -> None:
    monkeypatch.delenv("OHMTRAIL_DB", raising=False)
    monkeypatch.setenv("XDG_DATA_HOME", str(tmp_path / "fresh"))
    with open_store() as store:
        store.create(record())
    assert (tmp_path / "fresh" / "ohmtrail" / "sessions.db").is_file()


# --------------------------------------------------------------------------- PostgreSQL


def test_postgres_steps_in_order_and_unknown_ids(pg_url: str) -> None:
    with open_store(pg_url) as store:
        store.create(record())
        store.append("s1", step(0, "start"))
        with pytest.raises(SessionError, match="out of order"):
            store.append("s1", step(0))
        store.update("s1", status="concluded")
        with pytest.raises(SessionError, match="no session 'nope'"):
            store.load("nope")
    with open_store(pg_url) as again:
        assert [s.kind for s in again.load("s1").steps] == ["start"] and again.load("s1").status == "concluded"



@settings(max_examples=15, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture])
@given(sessions())
def test_postgres_round_trip(pg_url: str, session: SessionRecord) -> None:
    # pg_url (tests/conftest.py): a fresh database on the throwaway test server
    with open_store(pg_url) as store:
        store.create(session)
        assert store.load(session.id) == session
        assert any(s.id == session.id and s.steps == len(session.steps) for s in store.list())


def test_postgres_unreachable_is_one_line(tmp_path: Path) -> None:
    with pytest.raises(StoreError, match="cannot reach the session store") as caught:
        open_store(f"postgresql://nobody@/db?host={tmp_path}&port=1", busy_timeout=1)
    assert "\n" not in str(caught.value)
