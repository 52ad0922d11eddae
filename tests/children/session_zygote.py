"""A child for the kill tests: loads everything once, then forks a session runner per request.

    python tests/children/session_zygote.py DB_URL RULESET

Importing the engine (numpy, pint, pydantic, SQLAlchemy, the rules engine) and predicting
the ruleset takes seconds; a kill test that killed 50 fresh interpreters would spend nearly
all its time there. So this process does it once and prints "ready"; then for each line
"run SEED REPORT" on stdin it forks a runner and prints "child PID". The parent kills the
runner with SIGKILL whenever it likes. The zygote never touches the database itself.

A runner opens its own store, resumes the session left open (if any) or begins a new one,
and answers each question as a technician would type it (values drawn from the prediction
table under one fault, sometimes a note or an undo), closing each concluded session with a
repair and a verification reading and starting the next. After every commit it appends a
line to REPORT (unbuffered): "commit SESSION INDEX DIGEST" once ``Store.append`` has
returned, "resumed SESSION STEPS" after a resume, "error MESSAGE" if something failed.
"""

from __future__ import annotations

import os
import signal
import sys
import traceback
from pathlib import Path
from typing import Any

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

import numpy as np  # noqa: E402

from assistant.page import ClosingPage, Question  # noqa: E402
from assistant.record import Step  # noqa: E402
from assistant.ruleset import load_ruleset  # noqa: E402
from assistant.session import Engine, Session  # noqa: E402
from assistant.sources import Action, Answer, Closing, Intake, Note, Undo  # noqa: E402
from assistant.store import Store, open_store  # noqa: E402


class Reporter:
    def __init__(self, path: str) -> None:
        self.fd = os.open(path, os.O_WRONLY | os.O_CREAT | os.O_APPEND, 0o644)

    def line(self, text: str) -> None:
        os.write(self.fd, (text.replace("\n", " ") + "\n").encode("utf-8", "backslashreplace"))


class ReportingStore:
    """The real store; each append is reported once it has returned (that is, committed)."""

    def __init__(self, store: Store, reporter: Reporter) -> None:
        self._store = store
        self._reporter = reporter

    def append(self, session_id: str, step: Step) -> None:
        self._store.append(session_id, step)
        self._reporter.line(f"commit {session_id} {step.index} {step.digest}")

    def __getattr__(self, name: str) -> Any:
        return getattr(self._store, name)


class Technician:
    """Types readings drawn from the prediction table under one hypothesis; now and then a note or an undo."""

    label = "kill-test technician"

    def __init__(self, engine: Engine, hypothesis: int, seed: int) -> None:
        self.table = engine.table
        self.hypothesis = hypothesis
        self.rng = np.random.default_rng(seed)

    def intake(self, ruleset: Any) -> Intake:
        complaint = ruleset.complaints[0].id if ruleset.complaints else None
        return Intake(technician="K. Iller", complaint=complaint, notes=("van in bay 3",))

    def typed(self, test_id: str, hypothesis: int) -> str:
        t = self.table.test_index(test_id)
        info = self.table.tests[t]
        if info.kind == "observation" or not info.unit:
            probs = self.table.observations[t][hypothesis]
            return str(info.outcomes[int(self.rng.choice(len(probs), p=probs / probs.sum()))])
        value = float(self.table.samples[hypothesis, t, int(self.rng.integers(self.table.samples.shape[2]))])
        if not np.isfinite(value):
            return "OL"
        return f"{value:.4g} {info.unit}"

    def ask(self, question: Question) -> Action:
        roll = self.rng.random()
        if roll < 0.08:
            return Note(f"checked connector before {question.test.id}")
        if roll < 0.12 and question.answered:
            return Undo()
        return Answer(text=self.typed(question.test.id, self.hypothesis))

    def refused(self, question: Question, reason: str) -> None:
        raise RuntimeError(f"reading refused: {reason}")

    def tell(self, message: str) -> None:
        pass

    def close(self, page: ClosingPage) -> Closing | None:
        repair = page.repair_action or "repaired"
        if page.verification is None:
            return Closing(repair)
        return Closing(repair, Answer(text=self.typed(page.verification.test.id, 0)))


def run(engine: Engine, url: str, seed: int, reporter: Reporter) -> None:
    store = ReportingStore(open_store(url), reporter)
    rng = np.random.default_rng(seed)
    hypotheses = len(engine.table.hypotheses)
    while True:
        open_ids = [s.id for s in store.list() if s.status in ("open", "concluded")]
        if open_ids:
            session = Session.resume(store, open_ids[-1], engine_for=lambda _record: engine)  # type: ignore[arg-type]
            reporter.line(f"resumed {session.id} {len(session.steps)}")
        else:
            session = Session.begin(store, engine, Technician(engine, 1, seed))  # type: ignore[arg-type]
        session.run(Technician(engine, int(rng.integers(1, hypotheses)), int(rng.integers(1 << 30))))


def main(url: str, ruleset: str) -> int:
    engine = Engine.build(load_ruleset(ruleset))
    # The first Diagnosis.start builds the evidence model of the table (seconds); it is kept
    # per table object, so building it here once spares every forked runner.
    from assistant.diagnosis import Context

    engine.start(engine.loaded, engine.table, Context(), None)
    signal.signal(signal.SIGCHLD, signal.SIG_IGN)  # runners are reaped by the kernel
    print("ready", flush=True)
    for line in sys.stdin:
        parts = line.split()
        if not parts or parts[0] != "run":
            continue
        seed, report = int(parts[1]), parts[2]
        pid = os.fork()
        if pid == 0:
            signal.signal(signal.SIGCHLD, signal.SIG_DFL)
            reporter = Reporter(report)
            try:
                run(engine, url, seed, reporter)
            except BaseException as exc:  # the parent reads this and fails the test
                reporter.line(f"error {type(exc).__name__}: {exc} | "
                              + " / ".join(traceback.format_exception(exc)[-3:]))
                os._exit(1)
            os._exit(0)
        print(f"child {pid}", flush=True)
    return 0


if __name__ == "__main__":
    sys.exit(main(sys.argv[1], sys.argv[2]))
