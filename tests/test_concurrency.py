"""Several processes writing sessions to one store at once: no step lost, none mixed up.

Two to four writer processes (tests/children/store_writer.py) start together on one SQLite
file (WAL, busy timeout) and on one PostgreSQL database, each writing its own sessions with
their steps interleaved. Afterwards every session holds exactly its own steps, in order, each
chained to the one before (the export's integrity check), and SQLite's integrity check passes.
"""

from __future__ import annotations

import sqlite3
import subprocess
import sys
from pathlib import Path

import pytest

from assistant.export import check_record
from assistant.store import open_store

WRITER = Path(__file__).resolve().parent / "children" / "store_writer.py"
SESSIONS, STEPS = 3, 10


def _run_writers(url: str, writers: int) -> list[str]:
    procs = [subprocess.Popen([sys.executable, str(WRITER), url, str(w), str(SESSIONS), str(STEPS)],
                              stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True)
             for w in range(writers)]
    try:
        for p in procs:
            assert p.stdout is not None
            line = p.stdout.readline().strip()
            assert line == "ready", f"writer did not start: {line!r} {p.stderr.read() if p.stderr else ''}"
        for p in procs:  # all at once
            assert p.stdin is not None
            p.stdin.write("go\n")
            p.stdin.flush()
        outputs = []
        for p in procs:
            out, err = p.communicate(timeout=300)
            outputs.append(out.strip())
            assert p.returncode == 0, f"a writer failed: {out.strip()} {err.strip()[-2000:]}"
        return outputs
    finally:
        for p in procs:
            if p.poll() is None:
                p.kill()
                p.wait()


def _check_store(url: str, writers: int) -> None:
    sys.path.insert(0, str(WRITER.parent))
    from store_writer import expected_reading, session_id

    with open_store(url) as store:
        summaries = {s.id: s for s in store.list()}
        expected_ids = {session_id(w, n) for w in range(writers) for n in range(SESSIONS)}
        assert set(summaries) == expected_ids
        for w in range(writers):
            for n in range(SESSIONS):
                sid = session_id(w, n)
                record = store.load(sid)
                assert record.technician == f"writer {w}"
                assert [s.index for s in record.steps] == list(range(STEPS))
                assert [s.note for s in record.steps] == [f"{sid}:{i}" for i in range(STEPS)]
                assert [s.reading for s in record.steps] == [expected_reading(w, n, i) for i in range(STEPS)]
                result = check_record(record)
                assert result.intact, result.message


@pytest.mark.parametrize("writers", [2, 4])
def test_writers_share_one_sqlite_file(tmp_path: Path, writers: int) -> None:
    db = tmp_path / "shared.db"
    url = f"sqlite:///{db}"
    open_store(url).close()  # created once, so that the writers race on writing, not on creating
    outputs = _run_writers(url, writers)
    assert outputs == [f"done {SESSIONS * STEPS}"] * writers
    _check_store(url, writers)
    with sqlite3.connect(db) as conn:
        assert conn.execute("PRAGMA integrity_check").fetchone()[0] == "ok"
        assert conn.execute("PRAGMA journal_mode").fetchone()[0] == "wal"


@pytest.mark.parametrize("writers", [2, 4])
def test_writers_share_one_postgresql_database(pg_url: str, writers: int) -> None:
    open_store(pg_url).close()
    outputs = _run_writers(pg_url, writers)
    assert outputs == [f"done {SESSIONS * STEPS}"] * writers
    _check_store(pg_url, writers)
