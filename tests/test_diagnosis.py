"""The Diagnosis facade: immutable states, commands, conflicts and widening to pairs."""

from __future__ import annotations

from collections.abc import Sequence

import pytest

from assistant.diagnosis import Conclusion, Conflict, Context, Diagnosis, Proposal
from assistant.errors import ReadingError, SessionError
from assistant.predict import Hypothesis, PredictionTable
from assistant.reading import Reading
from synthetic_tables import TINY_DEFAULT, TINY_SPEC, build_table, tiny_lamp

LOADED, TABLE = tiny_lamp()


def start(**context: object) -> Diagnosis:
    return Diagnosis.start(LOADED, TABLE, Context(**context), widen=lambda pairs: TABLE)  # type: ignore[arg-type]


def test_rule_requires_the_fuse_first() -> None:
    step = start(complaint="out").next()
    assert isinstance(step, Proposal)
    assert step.test_id == "look_fuse" and step.why.rule == "fuse_first"


def test_complaint_scales_the_faults_it_does_not_point_to() -> None:
    plain = dict(start().ranking())
    out = dict(start(complaint="out").ranking())
    # the strap is not a suspect of "out": its share falls by about the "others" factor 0.1
    assert out["strap.high_resistance"] < 0.2 * plain["strap.high_resistance"]
    assert "complaint 'nope'" in start(complaint="nope").warnings[0]


def test_states_are_immutable_and_undo_returns_the_one_before() -> None:
    d0 = start()
    d1 = d0.answer("v_feed", Reading("12.60", value=12.6))
    assert d0.answered == () and len(d1.answered) == 1
    assert d1.undo() is d0
    with pytest.raises(SessionError, match="nothing to undo"):
        d0.undo()


def test_a_bad_reading_raises_and_loses_nothing() -> None:
    d1 = start().answer("v_feed", Reading("12.60", value=12.6))
    with pytest.raises(ReadingError):
        d1.answer("r_lamp", Reading("yes", outcome="yes"))
    with pytest.raises(ReadingError, match="beyond"):
        d1.answer("drop_gnd", Reading("99999 V", value=99999.0))
    assert d1.answered == (("v_feed", Reading("12.60", value=12.6)),)
    assert isinstance(d1.next(), (Proposal, Conclusion))


def test_unknown_test_is_a_session_error() -> None:
    with pytest.raises(SessionError, match="unknown test"):
        start().answer("v_nowhere", Reading("1", value=1.0))


def test_skip_leaves_the_test_out() -> None:
    d = start()
    first = d.next()
    assert isinstance(first, Proposal)
    after = d.skip(first.test_id).next()
    assert isinstance(after, Proposal) and after.test_id != first.test_id


def test_remeasure_proposes_an_answered_test_and_a_new_reading_replaces_the_old() -> None:
    d = start().answer("v_feed", Reading("5.30", value=5.3))
    again = d.remeasure("v_feed")
    assert again.remeasure and again.test_id == "v_feed" and again.gain_bits > 0
    d2 = d.answer("v_feed", Reading("12.60", value=12.6))
    assert d2.answered == (("v_feed", Reading("12.60", value=12.6)),)
    with pytest.raises(SessionError):
        start().remeasure("v_feed")


def test_all_tests_skipped_concludes_with_no_tests_left() -> None:
    d = start()
    for t in TABLE.tests:
        d = d.skip(t.id)
    end = d.next()
    assert isinstance(end, Conclusion) and end.stopped_because == "no tests left"
    assert end.diagnosis is None  # nothing is certain enough
    assert len(end.ranking) == len(TABLE.hypotheses)


def _pair_table(pairs: Sequence[tuple[str, str]]) -> PredictionTable:
    hyps = list(TABLE.hypotheses)
    spec = dict(TINY_SPEC)
    for a, b in pairs:
        pa, pb = (TABLE.hypotheses[TABLE.hypothesis_index(x)] for x in (a, b))
        hyps.append(Hypothesis(f"{a}+{b}", (a, b), pa.prior * pb.prior, f"{pa.repair}; {pb.repair}",
                               pa.repair_minutes + pb.repair_minutes))
        if {a, b} == {"lamp.filament_open", "strap.high_resistance"}:
            # invented: this pair shows the feed healthy, the ground drop high and the lamp open
            spec[f"{a}+{b}"] = {"v_feed": (12.3, 0.05), "drop_gnd": ("uniform", 1.0, 6.0), "r_lamp": "OL"}
        else:  # the others read as their first fault does
            spec[f"{a}+{b}"] = TINY_SPEC[a]
    return build_table(hyps, TABLE.tests, spec, default=TINY_DEFAULT)


def test_readings_that_fit_nothing_name_the_worst_and_widen_to_pairs() -> None:
    asked: list[tuple[str, str]] = []

    def widen(pairs: Sequence[tuple[str, str]]) -> PredictionTable:
        asked.extend(pairs)
        return _pair_table(pairs)

    d = Diagnosis.start(LOADED, TABLE, Context(), widen=widen)
    d = d.answer("r_lamp", Reading("OL", overload=True))
    assert d.conflict is None and not asked  # the open lamp explains OL
    d = d.answer("drop_gnd", Reading("3.10", value=3.1))  # ... but not a 3 V ground drop
    assert isinstance(d.conflict, Conflict)
    assert "re-measure" in d.conflict.message
    assert d.conflict.test_id in {"r_lamp", "drop_gnd"}
    assert d.conflict.widened and asked
    assert ("lamp.filament_open", "strap.high_resistance") in asked or \
        ("strap.high_resistance", "lamp.filament_open") in asked
    d = d.answer("v_feed", Reading("12.30", value=12.3))
    assert d.conflict is None  # the pair explains every reading
    assert len(d.table.hypotheses) > len(TABLE.hypotheses)
    top, p = d.ranking()[0]
    assert "+" in top and {"lamp.filament_open", "strap.high_resistance"} == set(top.split("+"))
    assert p > 0.5


def test_consistent_readings_raise_no_conflict() -> None:
    d = start().answer("v_feed", Reading("12.60", value=12.6)).answer("r_lamp", Reading("OL", overload=True))
    assert d.conflict is None


def test_threshold_argument_overrides_the_ruleset() -> None:
    d = Diagnosis.start(LOADED, TABLE, Context(), threshold=0.6)
    assert d.threshold == 0.6
    with pytest.raises(SessionError):
        Diagnosis.start(LOADED, TABLE, Context(), threshold=0.3)
