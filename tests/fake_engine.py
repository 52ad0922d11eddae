"""A small stand-in diagnosis engine, so the session's own bookkeeping is tested on its own.

Three hypotheses (none, lamp open, ground corroded) and two tests. The rule of the fake: a
voltage below 6 V on ``t_volts`` makes ``lamp.open`` certain, one above 6 V with ``t_look``
answered "yes" makes ``gnd.high_resistance`` certain; otherwise it asks ``t_volts`` first, then
``t_look``, and stops with "no tests left". It only has to be predictable, not realistic.
"""

from __future__ import annotations

from dataclasses import dataclass, field, replace
from pathlib import Path
from typing import Any

from assistant.errors import ReadingError, SessionError
from assistant.page import ClosingPage, Question, TestPage
from assistant.predict import TestInfo
from assistant.reading import Reading
from assistant.session import Engine

VOLTS = TestInfo("t_volts", "voltage", "V", 2.0, "on")
LOOK = TestInfo("t_look", "observation", "", 1.0, None, ("yes", "no"))
TESTS = (VOLTS, LOOK)


@dataclass(frozen=True)
class FakeProposal:
    test_id: str
    gain_bits: float = 0.9
    cost_minutes: float = 2.0
    why: str = "splits the suspects"
    remeasure: bool = False


@dataclass(frozen=True)
class FakeRepair:
    fault_id: str
    probability: float
    action: str
    minutes: float


@dataclass(frozen=True)
class FakeConclusion:
    diagnosis: str | None
    probability: float
    stopped_because: str
    ranking: tuple[tuple[str, float], ...]
    repairs: tuple[FakeRepair, ...]
    verification_test: str | None


@dataclass(frozen=True)
class FakeDiagnosis:
    answered: tuple[tuple[str, Reading], ...] = ()
    skipped: tuple[str, ...] = ()
    rules_fired: tuple[str, ...] = ()
    cautions: tuple[str, ...] = ()
    conflict: Any = None
    history: tuple[Any, ...] = field(default=(), repr=False)

    @classmethod
    def start(cls, loaded: Any, table: Any, context: Any, threshold: float | None = None) -> FakeDiagnosis:
        fired = ("complaint_rule",) if context.complaint == "dim" else ()
        return cls(rules_fired=fired)

    def _value(self, test_id: str) -> Reading | None:
        found = [r for t, r in self.answered if t == test_id]
        return found[-1] if found else None

    def ranking(self) -> tuple[tuple[str, float], ...]:
        volts, look = self._value("t_volts"), self._value("t_look")
        if volts is not None and volts.value is not None and volts.value < 6:
            return (("lamp.open", 0.97), ("gnd.high_resistance", 0.02), ("none", 0.01))
        if volts is not None and look is not None and look.outcome == "yes":
            return (("gnd.high_resistance", 0.96), ("lamp.open", 0.03), ("none", 0.01))
        return (("gnd.high_resistance", 0.5), ("lamp.open", 0.4), ("none", 0.1))

    def next(self) -> FakeProposal | FakeConclusion:
        ranking = self.ranking()
        best, p = ranking[0]
        if p >= 0.95 or all(t.id in self.skipped or self._value(t.id) for t in TESTS):
            return FakeConclusion(best if p >= 0.95 else None, p,
                                  "threshold reached" if p >= 0.95 else "no tests left", ranking,
                                  (FakeRepair(best, p, f"repair {best}", 10.0),), "t_volts")
        for t in TESTS:
            if t.id not in self.skipped and self._value(t.id) is None:
                return FakeProposal(t.id)
        raise AssertionError("unreachable")

    def answer(self, test_id: str, reading: Reading) -> FakeDiagnosis:
        if test_id == "t_volts" and reading.value is not None and reading.value > 30:
            raise ReadingError("above any voltage this circuit can show")
        fired = self.rules_fired + (("low_volts_rule",) if reading.value is not None and reading.value < 6 else ())
        return replace(self, answered=self.answered + ((test_id, reading),), rules_fired=fired,
                       history=self.history + (self,))

    def skip(self, test_id: str) -> FakeDiagnosis:
        return replace(self, skipped=self.skipped + (test_id,), history=self.history + (self,))

    def undo(self) -> FakeDiagnosis:
        if not self.history:  # as the real engine: the state before the last answer or skip
            raise SessionError("nothing to undo")
        return self.history[-1]

    def remeasure(self, test_id: str) -> FakeProposal:
        if test_id not in {t.id for t in TESTS}:
            raise SessionError(f"unknown test '{test_id}'")
        return FakeProposal(test_id, remeasure=True)


class FakePages:
    def __init__(self) -> None:
        self.infos = {t.id: t for t in TESTS}

    def page(self, test_id: str, remeasure: bool = False) -> TestPage:
        info = self.infos[test_id]
        low, high = (11.5, 12.7) if info.unit else (None, None)
        return TestPage(test_id=test_id, title=test_id, kind=info.kind, unit=info.unit, what="measure it",
                        where=("here",), access=None, state=None, setup=(), cautions=("careful",),
                        healthy_low=low, healthy_high=high, healthy="11.5 V to 12.7 V" if info.unit else "no",
                        cost_minutes=info.cost_minutes, outcomes=info.outcomes,
                        expected_outcome="no" if not info.unit else None, remeasure=remeasure)

    def question(self, proposal: Any, diagnosis: Any, answered: int) -> Question:
        return Question(proposal, self.infos[proposal.test_id], self.page(proposal.test_id, proposal.remeasure),
                        diagnosis.ranking(), "why: it splits", answered, tuple(self.infos))

    def closing(self, conclusion: Any, diagnosis: Any) -> ClosingPage:
        verification = Question(None, VOLTS, self.page("t_volts"), conclusion.ranking, "", 0,  # type: ignore[arg-type]
                                tuple(self.infos))
        first = conclusion.repairs[0]
        return ClosingPage(conclusion, conclusion.diagnosis or "none", first.action, (first.fault_id,), verification)

    def session_cautions(self, extra: Any) -> tuple[str, ...]:
        return ("careful",) + tuple(extra)


@dataclass(frozen=True)
class _Ruleset:
    id: str = "fake"
    version: str = "1"
    title: str = "fake circuit"
    complaints: tuple[Any, ...] = ()
    rules: tuple[Any, ...] = ()
    components: tuple[Any, ...] = ()


@dataclass(frozen=True)
class _Complaint:
    id: str
    text: str


@dataclass(frozen=True)
class _Loaded:
    ruleset: Any
    path: str
    sha256: str = "f" * 64
    overlays: tuple[str, ...] = ()


def fake_engine(tmp_path: Path) -> Engine:
    path = tmp_path / "fake.yaml"
    path.write_text("fake\n", encoding="utf-8")
    ruleset = _Ruleset(complaints=(_Complaint("dim", "lamp is dim"),))
    return Engine(_Loaded(ruleset, str(path)), table=None, pages=FakePages(),  # type: ignore[arg-type]
                  start=FakeDiagnosis.start, context=lambda record: record)
