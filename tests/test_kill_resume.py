"""A session killed with SIGKILL after N answers, then resumed: all N answers are there."""

from __future__ import annotations

import os
import re
import signal
import subprocess
import sys
import time
from pathlib import Path

from prompt_toolkit.input import create_pipe_input
from prompt_toolkit.output import DummyOutput

from assistant.predict import TestInfo as Info
from assistant.prompt import PromptSource
from assistant.session import Session, engine_for_record
from assistant.store import open_store
from tests.conftest import ROOT, STOP_LAMPS

PAGE = re.compile(r"^-- Test \d+: .* \[(?P<test>[A-Za-z0-9_+\-]+)\]")
# A plausible reading for each kind of test (any that fits the test will do here).
TYPED = {"voltage": "12.1", "drop": "0.05", "resistance": "0.7", "current": "1.6 A", "fuse_drop": "3 mV"}


def typed_for(test: Info) -> str:
    return test.outcomes[0] if test.kind == "observation" else TYPED[test.kind]


def readings(url: str, session_id: str) -> list[tuple[str | None, str | None]]:
    with open_store(url) as store:
        if not store.exists(session_id):
            return []
        return [(s.test_id, s.reading_text) for s in store.load(session_id).steps if s.kind == "reading"]


def test_killed_after_two_answers_then_resumed(tmp_path: Path) -> None:
    url = f"sqlite:///{tmp_path / 'sessions.db'}"
    engine_tests: dict[str, Info] = {}
    child = subprocess.Popen(
        [sys.executable, str(ROOT / "tests" / "session_child.py"), url, "k1", str(STOP_LAMPS)],
        stdin=subprocess.PIPE, stdout=subprocess.PIPE, stderr=subprocess.PIPE, text=True, cwd=ROOT,
        env=dict(os.environ, PYTHONPATH=str(ROOT)),
    )
    try:
        assert child.stdin is not None and child.stdout is not None
        from assistant.predict import predict
        from assistant.ruleset.load import load_ruleset

        engine_tests = {t.id: t for t in predict(load_ruleset(STOP_LAMPS)).tests}
        # The intake: no VIN, fleet number, odometer, model year, technician; complaint 3 (left_dim); no codes.
        child.stdin.write("\n" * 5 + "3\n\n")
        child.stdin.flush()
        answered: list[tuple[str, str]] = []
        for line in child.stdout:  # read the pages as the technician would, and answer them
            match = PAGE.match(line)
            if match:
                test = engine_tests[match.group("test")]
                text = typed_for(test)
                answered.append((test.id, text))
                child.stdin.write(text + "\n")
                child.stdin.flush()
                if len(answered) == 2:
                    break
        deadline = time.monotonic() + 120
        while len(readings(url, "k1")) < 2:  # the second answer is committed...
            assert time.monotonic() < deadline, "the second answer never reached the store"
            time.sleep(0.1)
        child.send_signal(signal.SIGKILL)  # ...and then the process dies without any chance to clean up
        child.wait(timeout=30)
    finally:
        if child.poll() is None:
            child.kill()
            child.wait()
        for stream in (child.stdin, child.stdout, child.stderr):
            if stream is not None:
                stream.close()
    assert child.returncode == -signal.SIGKILL

    stored = readings(url, "k1")
    assert [t for t, _ in stored] == [t for t, _ in answered]
    with open_store(url) as store:
        assert store.load("k1").status == "open"
        session = Session.resume(store, "k1", engine_for_record)
        recap = session.recap()
        for test_id, _ in answered:  # resuming shows both answers
            assert any(line.split(". ", 1)[1].startswith(f"{test_id}: ") for line in recap), recap
        shown: list[str] = []
        with create_pipe_input() as pipe:
            pipe.send_text("quit\n")
            pipe.close()
            source = PromptSource(session.engine.loaded.ruleset, input=pipe, output=DummyOutput(),
                                  write=shown.append)
            record = session.run(source)
        asked = PAGE.match(shown[0])
        assert asked is not None and asked.group("test") not in {t for t, _ in answered}  # carries on
    assert [s.test_id for s in record.steps if s.kind == "reading"] == [t for t, _ in answered]
    previous = None
    from assistant.export import step_digest

    for step in record.steps:  # the chain is whole: nothing half-written by the kill
        assert step.digest == step_digest(previous, step)
        previous = step.digest
