"""A scripted session killed with SIGKILL at random points, 50 times: nothing committed is lost.

The issue's acceptance: 50 kills, 0 answers lost, SQLite's integrity check ok after each. The
runners are forked from one prepared process (tests/kill_harness.py), so the 50 kills take
seconds, not minutes.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from assistant.export import check_record
from assistant.session import Session
from assistant.sources import Answer, Quit
from assistant.store import Store, open_store
from tests.fake_engine import fake_engine
from tests.kill_harness import run_kills
from tests.test_session import Scripted

KILLS = 50


def test_fifty_kills_lose_no_committed_answer(tmp_path: Path) -> None:
    stats = run_kills(tmp_path, KILLS, seed=20261201)
    assert stats.errors == []
    assert stats.kills == KILLS
    assert stats.lost == 0
    assert stats.integrity_failures == 0
    assert stats.broken_chains == 0
    assert stats.resume_short == 0
    # The kills really land inside sessions (not between idle runs), and sessions go on across
    # them: most runners resumed one left open by the runner before.
    assert stats.killed_mid_session >= KILLS * 0.6
    assert stats.resumes >= KILLS * 0.5
    assert stats.commits_reported >= KILLS


class _DiesOnFirstAppend:
    """A store that loses the process right after the record is created (as a kill would)."""

    def __init__(self, store: Store) -> None:
        self._store = store

    def append(self, session_id: str, step: object) -> None:
        raise _Killed

    def __getattr__(self, name: str) -> object:
        return getattr(self._store, name)


class _Killed(Exception):
    pass


def test_a_session_killed_before_its_first_step_resumes_with_its_start(tmp_path: Path) -> None:
    # Found by the kill test: a runner killed between store.create and the start step left a
    # session with no steps; resuming it went straight to a reading, so its trail had no start
    # (complaint) step and the rules fired at the start were never recorded.
    engine = fake_engine(tmp_path)
    with open_store(f"sqlite:///{tmp_path / 's.db'}") as store:
        source = Scripted([])
        with pytest.raises(_Killed):
            Session.begin(_DiesOnFirstAppend(store), engine, source, session_id="s1")  # type: ignore[arg-type]
        assert store.load("s1").steps == ()
        resumed = Session.resume(store, "s1", lambda rec: engine)
        record = resumed.run(Scripted([Answer("12.4"), Quit()]))
        assert [s.kind for s in record.steps] == ["start", "rule", "reading"]
        assert record.steps[0].note == "lamp is dim"
        assert check_record(record).intact
