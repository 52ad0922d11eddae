"""The test page: everything a technician needs to make one measurement, and its plain-text form.

A page says what to measure and where (each node's probe note), the operating state to set,
the meter set-up (from the test and the meter profile), the cautions that apply, the healthy
range and the cost in minutes. The prompt shows it, a narrated session writes it, and the
report can reuse the same fields. Building a page is pure; rendering returns text.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from assistant.cautions import cautions_for, session_cautions
from assistant.display import format_quantity, format_range
from assistant.preparation import pending, test_minutes
from assistant.reading import Reading

if TYPE_CHECKING:
    from assistant.diagnosis import Conclusion, Diagnosis, Proposal
    from assistant.meter import MeterProfile
    from assistant.predict import PredictionTable, TestInfo
    from assistant.ruleset.load import LoadedRuleset
    from assistant.ruleset.model import Ruleset
    from assistant.sources import Intake

@dataclass(frozen=True)
class TestPage:
    """One measurement as the technician makes it."""

    test_id: str
    title: str
    kind: str
    unit: str
    what: str  # the measurement in one sentence
    where: tuple[str, ...]  # one line per test point: its label, connector, pin, wire, where, how to probe
    access: str | None
    state: str | None  # the operating state to set, with its instructions
    setup: tuple[str, ...]  # meter set-up lines: function, range, red lead jack, black lead
    cautions: tuple[str, ...]
    healthy_low: float | None  # SI; None where open-ended or OL
    healthy_high: float | None
    healthy: str | None  # the healthy range for people, "12.2 V to 12.6 V", "OL", "no"
    cost_minutes: float
    question: str | None = None  # an observation's question
    outcomes: tuple[str, ...] = ()
    expected_outcome: str | None = None  # an observation's most likely answer when nothing is wrong
    remeasure: bool = False
    prepare: tuple[str, ...] = ()  # the preparations still to make, one line each (their minutes in the cost)


@dataclass(frozen=True)
class Question:
    """What the session puts to its reading source: the proposal, its test and its page."""

    proposal: Proposal | None  # None for the verification test at the stop
    test: TestInfo
    page: TestPage
    ranking: tuple[tuple[str, float], ...]
    why: str  # the numbers behind the choice, as text
    answered: int  # readings taken so far
    test_ids: tuple[str, ...]  # every test of the ruleset, for "remeasure TEST"


@dataclass(frozen=True)
class ClosingPage:
    """The stop: the diagnosis, the repairs in order, and the verification test."""

    conclusion: Conclusion
    label: str  # the diagnosis in words
    repair_action: str | None
    repaired_faults: tuple[str, ...]  # the faults the first repair removes
    verification: Question | None


def verdict(reading: Reading, page: TestPage) -> str | None:
    """How a reading compares with what a healthy circuit shows.

    "in range" whenever it is what a healthy circuit shows (an observation's healthy outcome, OL
    where OL is healthy), "low" or "high" for a value outside the range, "OL" for an overload
    where a value was expected, "not as expected" for another outcome; None where nothing is known.
    """
    if reading.outcome is not None:
        if page.expected_outcome is None:
            return None
        return "in range" if reading.outcome == page.expected_outcome else "not as expected"
    if reading.overload:
        return "in range" if page.healthy == "OL" else "OL"
    if reading.value is None:
        return None
    if page.healthy_low is not None and reading.value < page.healthy_low:
        return "low"
    if page.healthy_high is not None and reading.value > page.healthy_high:
        return "high"
    if page.healthy_low is None and page.healthy_high is None:
        return None
    return "in range"


class PageMaker:
    """Builds pages for the tests of one ruleset from its prediction table and the meter profile."""

    def __init__(self, loaded: LoadedRuleset, table: PredictionTable, meter: MeterProfile | None) -> None:
        from assistant.predict import summarise

        self.loaded = loaded
        self.ruleset = loaded.ruleset
        self.table = table
        self.meter = meter
        self.summary = summarise(table)
        self._specs = {t.id: t for t in self.ruleset.tests}
        self._infos = {t.id: t for t in table.tests}

    def test_info(self, test_id: str) -> TestInfo:
        return self._infos[test_id]

    def page(self, test_id: str, extra_cautions: Iterable[str] = (), remeasure: bool = False,
             made: frozenset[str] = frozenset()) -> TestPage:
        """The page of one test, once the preparations ``made`` are made."""
        spec = self._specs[test_id]
        info = self._infos[test_id]
        prepare = []
        for ref, minutes in pending(info, made):
            prep = self.ruleset.preparations[ref]
            prepare.append(f"{prep.title} ({minutes:g} min)" + (f": {prep.instructions}" if prep.instructions else ""))
        low, high, healthy = self._healthy(spec, info)
        state = None
        if spec.state:
            st = self.ruleset.states.get(spec.state)
            if st is None:  # lint refuses an unknown state; an unlinted file still gets its page
                state = spec.state
            else:
                state = f"{st.label}: {st.instructions}" if st.instructions else st.label
        expected = None
        if info.kind == "observation":
            t = self.table.test_index(test_id)
            row = self.table.observations.get(t)
            if row is not None and len(info.outcomes):
                expected = info.outcomes[int(row[0].argmax())]
                healthy = expected
        return TestPage(
            test_id=test_id, title=spec.title or test_id, kind=spec.kind, unit=info.unit,
            what=self._what(spec), where=tuple(self._where(spec)), access=spec.access, state=state,
            setup=self._setup(info, low, high), cautions=cautions_for(self.ruleset, spec, extra_cautions),
            healthy_low=low, healthy_high=high, healthy=healthy, cost_minutes=test_minutes(info, made),
            question=getattr(spec, "question", None), outcomes=info.outcomes, expected_outcome=expected,
            remeasure=remeasure, prepare=tuple(prepare),
        )

    def question(self, proposal: Proposal, diagnosis: Diagnosis, answered: int) -> Question:
        """The question for a proposal, in the diagnosis's current state."""
        cautions = tuple(getattr(diagnosis, "cautions", ()))
        made = diagnosis.preparations_made() if hasattr(diagnosis, "preparations_made") else frozenset()
        page = self.page(proposal.test_id, cautions, remeasure=bool(getattr(proposal, "remeasure", False)),
                         made=made)
        return Question(proposal=proposal, test=self._infos[proposal.test_id], page=page,
                        ranking=tuple(diagnosis.ranking()), why=why_text(proposal),
                        answered=answered, test_ids=tuple(self._specs))

    def test_question(self, test_id: str, ranking: tuple[tuple[str, float], ...] = (),
                      extra_cautions: Iterable[str] = ()) -> Question:
        """A question for one test that no proposal asked for (the verification test)."""
        return Question(proposal=None, test=self._infos[test_id], page=self.page(test_id, extra_cautions),
                        ranking=ranking, why="the test that proves the repair", answered=0,
                        test_ids=tuple(self._specs))

    def closing(self, conclusion: Conclusion, diagnosis: Diagnosis) -> ClosingPage:
        """The page at the stop."""
        label = self.hypothesis_label(conclusion.diagnosis) if conclusion.diagnosis else "no single fault"
        group = tuple(getattr(conclusion, "group", ()))  # an engine's conclusion may carry no group
        if conclusion.diagnosis and len(group) > 1:
            label = "one of: " + "; ".join(self.hypothesis_label(h) for h in group)
        first = conclusion.repairs[0] if conclusion.repairs else None
        verification = None
        if conclusion.verification_test and conclusion.verification_test in self._specs:
            verification = self.test_question(conclusion.verification_test, tuple(conclusion.ranking),
                                              tuple(getattr(diagnosis, "cautions", ())))
        repaired: tuple[str, ...] = ()
        if first is not None:
            fault = getattr(first, "fault_id", None)
            repaired = tuple(fault.split("+")) if fault else ()
        return ClosingPage(conclusion, label, first.action if first else None, repaired, verification)

    def session_cautions(self, extra: Iterable[str]) -> tuple[str, ...]:
        return session_cautions(self.ruleset, extra)

    def hypothesis_label(self, hypothesis_id: str) -> str:
        """A fault in words: "left stop lamp: high resistance"."""
        return hypothesis_label(self.ruleset, hypothesis_id)

    # ------------------------------------------------------------------ parts of a page

    def _what(self, spec: Any) -> str:
        kind = spec.kind
        name = self._node_name
        if kind == "voltage":
            ref = spec.reference or self.ruleset.ground
            if spec.instrument == "scan_tool":
                return f"the voltage the module reports at {name(spec.at)} (against {name(ref)}), on the scan tool's live data"
            return f"DC voltage at {name(spec.at)}, against {name(ref)}"
        if kind == "drop":
            a, b = spec.between
            return f"voltage drop from {name(a)} to {name(b)} while the circuit carries its load"
        if kind == "resistance":
            a, b = spec.between
            text = f"resistance between {name(a)} and {name(b)}, circuit de-energised"
            if spec.only:
                text += f"; measure {', '.join(self._component_name(c) for c in spec.only)} on its own"
            if spec.isolate:
                text += f"; disconnect {', '.join(self._component_name(c) for c in spec.isolate)} first"
            return text
        if kind == "current":
            return f"current through {self._component_name(spec.component)}, meter in series"
        if kind == "fuse_drop":
            return f"millivolt drop across {self._component_name(spec.fuse)} in place, read as its current"
        if kind == "observation":
            return str(spec.question)
        return str(spec.title or spec.id)

    def _node_name(self, node_id: str) -> str:
        node = self.ruleset.nodes.get(node_id)
        return f"{node_id} ({node.label})" if node is not None and node.label else node_id

    def _component_name(self, comp_id: str) -> str:
        for comp in self.ruleset.components:
            if comp.id == comp_id:
                return comp.label or comp.id
        return comp_id

    def _where(self, spec: Any) -> Iterable[str]:
        nodes: Sequence[str] = ()
        if spec.kind == "voltage":
            nodes = (spec.at, spec.reference or self.ruleset.ground)
        elif spec.kind in ("drop", "resistance"):
            nodes = tuple(spec.between)
        elif spec.kind == "current":
            comp = next((c for c in self.ruleset.components if c.id == spec.component), None)
            nodes = tuple(comp.nodes[:1]) if comp is not None else ()
        elif spec.kind == "fuse_drop":
            comp = next((c for c in self.ruleset.components if c.id == spec.fuse), None)
            nodes = tuple(comp.nodes) if comp is not None else ()
        for node_id in nodes:
            node = self.ruleset.nodes.get(node_id)
            if node is None:
                yield node_id
                continue
            parts = [p for p in (
                f"connector {node.connector}" if node.connector else None,
                f"pin {node.pin}" if node.pin else None,
                f"wire {node.wire}" if node.wire else None,
                node.location,
            ) if p]
            line = f"{node_id}: {node.label or node_id}"
            if parts:
                line += f" ({', '.join(parts)})"
            if node.probe:
                line += f"; {node.probe}"
            yield line

    def _healthy(self, spec: Any, info: TestInfo) -> tuple[float | None, float | None, str | None]:
        """The healthy range: the ruleset's own, else the 5th-95th percentile under "none"."""
        if info.kind == "observation":
            return None, None, None
        if spec.healthy is not None:
            low, high = spec.healthy
            return low, high, format_range(low, high, info.unit)
        row = self.summary.get("none", {}).get(info.id)
        if row is None:
            return None, None, None
        low, high = _number(row.get("low")), _number(row.get("high"))
        if low is None and high is None:
            return None, None, "OL"
        if high is None:
            return low, None, f"{format_range(low, None, info.unit)}, or OL"
        if low is not None and format_quantity(low, info.unit) == format_quantity(high, info.unit):
            return low, high, f"about {format_quantity(low, info.unit)}"
        return low, high, format_range(low, high, info.unit)

    def _setup(self, info: TestInfo, low: float | None, high: float | None) -> tuple[str, ...]:
        """Function and range, where each lead goes, and any note, from the meter profile."""
        if info.kind == "observation" or self.meter is None:
            return ()
        from assistant.meter import meter_setup

        expected = high if high is not None else low  # the range must hold the largest healthy value
        setup = meter_setup(info, self.meter, expected)
        if info.instrument == "scan_tool":  # no leads: "Meter: none, scan tool live data ..."
            return (f"none; {setup.function}, {setup.range}",) + ((setup.note,) if setup.note else ())
        lines = [f"{setup.function}, range {setup.range}", f"red lead: {setup.red_lead}",
                 f"black lead: {setup.black_lead}"]
        if setup.note:
            lines.append(setup.note)
        return tuple(lines)


def _number(value: Any) -> float | None:
    if isinstance(value, (int, float)) and not isinstance(value, bool) and math.isfinite(value):
        return float(value)
    return None


def why_text(proposal: Any) -> str:
    """The numbers behind a proposal, as text: gain, cost, the suspects it separates, each outcome."""
    why = getattr(proposal, "why", None)
    if why is not None and hasattr(why, "text"):
        return str(why.text())
    return (f"{proposal.test_id}: {proposal.gain_bits:.2f} bits for {proposal.cost_minutes:g} min"
            + (f"\n{why}" if why else ""))


def hypothesis_label(ruleset: Ruleset, hypothesis_id: str) -> str:
    """A hypothesis in words: "none" is no fault; a pair is two faults joined by "and"."""
    if hypothesis_id == "none":
        return "no fault in this circuit"
    labels = {c.id: c.label or c.id for c in ruleset.components}
    parts = []
    for fault in hypothesis_id.split("+"):
        comp, _, mode = fault.partition(".")
        parts.append(f"{labels.get(comp, comp)}: {mode.replace('_', ' ')}")
    return " and ".join(parts)


# --------------------------------------------------------------------------- text


def render_page(question: Question, heading: str | None = None) -> str:
    """A test page as text, for the terminal or a narrated session."""
    page = question.page
    heading = heading or f"Test {question.answered + 1}"
    lines = [f"-- {heading}: {page.title} [{page.test_id}]{' (again)' if page.remeasure else ''} --"]
    lines.append(f"Measure: {page.what}")
    for where in page.where:
        lines.append(f"  at {where}")
    for line in page.prepare:
        lines.append(f"First: {line}")
    if page.access:
        lines.append(f"Access: {page.access}")
    if page.state:
        lines.append(f"Set: {page.state}")
    if page.setup:
        lines.append(f"Meter: {page.setup[0]}")
        lines.extend(f"  {line}" for line in page.setup[1:])
    if page.healthy:
        lines.append(f"Healthy: {page.healthy}")
    lines.append(f"Cost: about {page.cost_minutes:g} min")
    if page.outcomes:
        lines.append(f"Answer: {' / '.join(page.outcomes)}")
    if page.cautions:
        lines.append("Cautions:")
        lines.extend(f"  ! {c}" for c in page.cautions)
    return "\n".join(lines)


def render_suspects(ranking: Sequence[tuple[str, float]], ruleset: Ruleset, n: int = 10) -> str:
    """The ranked suspects as a small table."""
    rows = [f"{p:6.1%}  {h}  ({hypothesis_label(ruleset, h)})" for h, p in ranking[:n]]
    return "\n".join(rows)


def render_intake(ruleset: Ruleset, intake: Intake) -> str:
    """The session's starting facts as text."""
    complaint = next((c.text for c in ruleset.complaints if c.id == intake.complaint), intake.complaint)
    v = intake.vehicle
    vehicle = ", ".join(p for p in (
        f"fleet no. {v.fleet_number}" if v.fleet_number else "", f"VIN {v.vin}" if v.vin else "",
        f"model year {v.model_year}" if v.model_year else "",
        f"{v.odometer_km:,.0f} km" if v.odometer_km is not None else "") if p)
    lines = [f"== {ruleset.title} ({ruleset.id} {ruleset.version}) =="]
    lines.append(f"Vehicle: {vehicle or 'not given'}")
    lines.append(f"Technician: {intake.technician or 'not given'}")
    lines.append(f"Complaint: {complaint or 'not given'}")
    lines.append(f"Fault codes: {', '.join(intake.fault_codes) or 'none'}")
    return "\n".join(lines)


def render_closing(page: ClosingPage) -> str:
    """The stop as text: the diagnosis, the repairs in order, the verification test."""
    c = page.conclusion
    lines = ["== Conclusion =="]
    group = tuple(getattr(c, "group", ()))  # an engine's conclusion may carry no group
    if c.diagnosis and len(group) > 1:
        head = ("No fault found beyond what the tests can resolve" if "none" in group
                else "The tests cannot tell these apart")
        lines.append(f"{head}: one of {', '.join(group)}, together {float(getattr(c, 'group_probability', 0.0)):.1%}")
        lines.append(f"  ({page.label}); most likely {c.diagnosis}, {c.probability:.1%}")
    elif c.diagnosis:
        lines.append(f"Diagnosis: {c.diagnosis} ({page.label}), probability {c.probability:.1%}")
    else:
        lines.append(f"No fault is certain enough (best {c.probability:.1%})")
    lines.append(f"Stopped because: {c.stopped_because}")
    if c.repairs:
        lines.append("Repairs, most worth doing first:")
        for r in c.repairs[:5]:
            lines.append(f"  - {r.action} [{r.fault_id}] ({r.probability:.1%}, {r.minutes:g} min)")
    if page.verification is not None:
        v = page.verification.page
        lines.append(f"Verify with: {v.title} [{v.test_id}], healthy {v.healthy or 'as before'}")
    return "\n".join(lines)
