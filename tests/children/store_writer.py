"""A child process for the concurrency tests: writes sessions to a shared store as fast as it can.

    python tests/children/store_writer.py URL WRITER SESSIONS STEPS

Prints "ready", waits for one line on stdin (so that every writer starts at once), creates
SESSIONS sessions and appends STEPS steps to each, round-robin across its sessions so that
the writers' transactions interleave as much as possible, then prints "done COUNT". Every
step says whose it is (note "SESSION:INDEX", a reading that encodes writer, session and
index) and is chained like a real session's (assistant.export.step_digest). A store error is
printed as "error MESSAGE" and the exit status is 1.
"""

from __future__ import annotations

import sys
from datetime import datetime, timezone
from pathlib import Path

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from assistant.errors import OhmtrailError  # noqa: E402
from assistant.export import step_digest  # noqa: E402
from assistant.record import SessionRecord, Step  # noqa: E402
from assistant.store import open_store  # noqa: E402


def session_id(writer: int, number: int) -> str:
    return f"w{writer}-s{number}"


def expected_reading(writer: int, number: int, index: int) -> float:
    return writer * 1_000_000 + number * 1_000 + index


def main(url: str, writer: int, sessions: int, steps: int) -> int:
    store = open_store(url)
    print("ready", flush=True)
    sys.stdin.readline()
    now = datetime.now(timezone.utc).isoformat()
    try:
        ids = [session_id(writer, n) for n in range(sessions)]
        for sid in ids:
            store.create(SessionRecord(id=sid, ruleset_id="stop_lamps", ruleset_version="1.0.0",
                                       ruleset_sha256="ab" * 32, started=now, technician=f"writer {writer}"))
        previous: dict[str, str | None] = dict.fromkeys(ids)
        written = 0
        for index in range(steps):
            for n, sid in enumerate(ids):
                step = Step(index=index, kind="note" if index else "start", at=now, note=f"{sid}:{index}",
                            reading=expected_reading(writer, n, index), test_id=f"t{index % 7}")
                step = step.model_copy(update={"digest": step_digest(previous[sid], step)})
                store.append(sid, step)
                previous[sid] = step.digest
                written += 1
    except OhmtrailError as exc:
        print(f"error {exc}", flush=True)
        return 1
    finally:
        store.close()
    print(f"done {written}", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1], int(sys.argv[2]), int(sys.argv[3]), int(sys.argv[4])))
