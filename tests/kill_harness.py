"""Kill a scripted session with SIGKILL at random points, many times; check nothing committed is lost.

Used by tests/test_kill.py (50 kills) and benchmarks/kill_sessions.py (as many as asked, with
the figures printed). The runner processes come from tests/children/session_zygote.py, forked
from one process that has already imported and predicted everything, so each kill costs
the session's own work only.

After every kill: SQLite's ``PRAGMA integrity_check`` says ok; every step the runner reported
as committed is in the store with the same digest; every session the runner touched still
verifies (its hash chain recomputes); and the next runner, resuming, finds at least every
step committed before.
"""

from __future__ import annotations

import os
import random
import signal
import sqlite3
import subprocess
import sys
import time
from dataclasses import dataclass, field
from pathlib import Path

from assistant.export import check_record
from assistant.store import open_store

ZYGOTE = Path(__file__).resolve().parent / "children" / "session_zygote.py"
STOP_LAMPS = Path(__file__).resolve().parent.parent / "rulesets" / "lamp" / "stop_lamps.yaml"


@dataclass
class KillStats:
    """What a run of kills did and found."""

    kills: int = 0
    commits_reported: int = 0
    lost: int = 0  # reported committed, then missing or different in the store
    integrity_failures: int = 0
    broken_chains: int = 0
    resumes: int = 0
    resume_short: int = 0  # a resume that found fewer steps than were committed
    killed_mid_session: int = 0  # kills that left a session open (or concluded, not closed) in the store
    sessions: int = 0
    errors: list[str] = field(default_factory=list)
    seconds: float = 0.0


def _lines(path: Path) -> list[str]:
    if not path.exists():
        return []
    text = path.read_text(encoding="utf-8", errors="replace")
    return [line for line in text.split("\n")[:-1]]  # a line still being written is not counted


def run_kills(folder: Path, kills: int, seed: int = 0, ruleset: Path = STOP_LAMPS,
              max_commits_before_kill: int = 6, max_delay_s: float = 0.02) -> KillStats:
    """Run ``kills`` runner processes one after another, each killed at a random point."""
    rng = random.Random(seed)
    db = folder / "kill.db"
    url = f"sqlite:///{db}"
    env = {**os.environ, "OHMTRAIL_CACHE": str(folder / "cache"), "PYTHONWARNINGS": "ignore"}
    stats = KillStats()
    started = time.perf_counter()
    zygote = subprocess.Popen([sys.executable, str(ZYGOTE), url, str(ruleset)], stdin=subprocess.PIPE,
                              stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, env=env)
    committed: dict[str, dict[int, str]] = {}  # session -> index -> digest, as reported
    try:
        assert zygote.stdin is not None and zygote.stdout is not None
        ready = zygote.stdout.readline().strip()
        if ready != "ready":
            raise RuntimeError(f"the session zygote did not start: {ready!r} {zygote.stderr.read() if zygote.stderr else ''}")
        for n in range(kills):
            report = folder / f"report-{n}.txt"
            zygote.stdin.write(f"run {rng.randrange(1 << 30)} {report}\n")
            zygote.stdin.flush()
            answer = zygote.stdout.readline().split()
            if len(answer) != 2 or answer[0] != "child":
                raise RuntimeError(f"the session zygote did not fork: {answer!r}")
            pid = int(answer[1])
            # A random point: after a random number of commits, plus a random delay that lands
            # as often in the middle of the next commit as between two.
            target = rng.randint(0, max_commits_before_kill)
            deadline = time.monotonic() + 60
            while time.monotonic() < deadline:
                lines = _lines(report)
                if sum(1 for line in lines if line.startswith("commit")) >= target:
                    break
                if any(line.startswith("error") for line in lines):
                    break
                time.sleep(0.001)
            time.sleep(rng.uniform(0, max_delay_s))
            try:
                os.kill(pid, signal.SIGKILL)
            except ProcessLookupError:
                pass  # it died of its own accord: the report says why
            _wait_gone(pid)
            stats.kills += 1
            lines = _lines(report)
            touched: set[str] = set()
            for line in lines:
                parts = line.split()
                if parts[0] == "commit":
                    committed.setdefault(parts[1], {})[int(parts[2])] = parts[3]
                    stats.commits_reported += 1
                    touched.add(parts[1])
                elif parts[0] == "resumed":
                    stats.resumes += 1
                    before = committed.get(parts[1], {})
                    if before and int(parts[2]) <= max(before):
                        stats.resume_short += 1
                    touched.add(parts[1])
                elif parts[0] == "error":
                    stats.errors.append(line)
            _check_after_kill(db, url, committed, touched, stats)
        stats.sessions = len(committed)
    finally:
        try:
            _out, err = zygote.communicate(timeout=10)  # closes its stdin: it exits
        except subprocess.TimeoutExpired:
            zygote.kill()
            _out, err = zygote.communicate()
        if zygote.returncode:
            stats.errors.append(f"the session zygote ended with status {zygote.returncode}: {err.strip()[-1000:]}")
    stats.seconds = time.perf_counter() - started
    return stats


def _wait_gone(pid: int) -> None:
    # The zygote ignores SIGCHLD, so the kernel reaps the runner; wait until it is gone.
    for _ in range(5000):
        try:
            os.kill(pid, 0)
        except ProcessLookupError:
            return
        time.sleep(0.001)


def _check_after_kill(db: Path, url: str, committed: dict[str, dict[int, str]], touched: set[str],
                      stats: KillStats) -> None:
    if not db.exists():
        return  # killed before the store was created: nothing was committed either
    with sqlite3.connect(db) as conn:
        if conn.execute("PRAGMA integrity_check").fetchone()[0] != "ok":
            stats.integrity_failures += 1
    left_open = False
    with open_store(url) as store:
        for session_id in touched:
            record = store.load(session_id)
            stored = {s.index: s.digest for s in record.steps}
            for index, digest in committed.get(session_id, {}).items():
                if stored.get(index) != digest:
                    stats.lost += 1
            if not check_record(record).intact:
                stats.broken_chains += 1
            left_open = left_open or record.status in ("open", "concluded")
    stats.killed_mid_session += left_open
