"""The planner: information gain, the choice of test, stopping, P-over-C repairs, why."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.stats import entropy

from assistant.beliefs import build_model
from assistant.diagnosis import Conclusion, Context, Diagnosis, Proposal
from assistant.planner import (
    PlannerSettings,
    ambiguity_groups,
    choose_test,
    entropy_after,
    expected_gain,
    gains,
    repair_order,
    stop_check,
)
from assistant.reading import Reading
from synthetic_tables import random_table, tiny_lamp

LOADED, TABLE = tiny_lamp()
MODEL = build_model(TABLE)
PRIOR = np.array([h.prior for h in TABLE.hypotheses])


def test_gain_equals_scipy_entropy_difference() -> None:
    """Reference: scipy.stats.entropy (base 2) of the prior minus the expected posterior entropy."""
    for outcomes in MODEL.tests:
        joint = PRIOR[:, None] * outcomes.probs
        pk = joint.sum(axis=0)
        after = sum(pk[k] * entropy(joint[:, k] / pk[k], base=2) for k in range(pk.size) if pk[k] > 0)
        reference = entropy(PRIOR, base=2) - after
        assert expected_gain(PRIOR, outcomes) == pytest.approx(reference, abs=1e-9)
        assert entropy_after(PRIOR, outcomes) == pytest.approx(after, abs=1e-9)


def test_gain_is_zero_for_a_test_that_cannot_tell_anything() -> None:
    p = np.zeros(len(TABLE.hypotheses))
    p[TABLE.hypothesis_index("lamp.filament_open")] = 1.0
    assert gains(p, MODEL, range(len(TABLE.tests))) == pytest.approx(0.0, abs=1e-12)


def test_choice_is_the_best_gain_per_minute() -> None:
    candidates = list(range(len(TABLE.tests)))
    choice = choose_test(PRIOR, MODEL, candidates, PlannerSettings())
    assert choice is not None
    per_minute = gains(PRIOR, MODEL, candidates) / np.array([t.cost_minutes for t in TABLE.tests])
    assert choice.test_index == int(np.argmax(per_minute))


def test_stop_at_threshold_and_when_no_tests_are_left() -> None:
    p = np.full(len(TABLE.hypotheses), 0.01 / (len(TABLE.hypotheses) - 1))
    p[TABLE.hypothesis_index("lamp.filament_open")] = 0.99
    stop = stop_check(p, MODEL, [1, 2], PlannerSettings(), 0.5)
    assert stop is not None and stop.reason == "threshold reached" and stop.certain
    every = range(len(TABLE.tests))
    stop = stop_check(PRIOR, MODEL, [], PlannerSettings(), None, skipped=every)  # skipped ones could tell
    assert stop is not None and stop.reason == "no tests left" and not stop.certain
    stop = stop_check(PRIOR, MODEL, [1], PlannerSettings(min_gain_bits=0.5), 0.1)
    assert stop is not None and stop.reason == "no test can change the answer"
    assert stop_check(PRIOR, MODEL, [1], PlannerSettings(), 0.3) is None


def _left_with(weights: dict[str, float]) -> np.ndarray:
    p = np.full(len(TABLE.hypotheses), 1e-6)
    for h, w in weights.items():
        p[TABLE.hypothesis_index(h)] = w
    return p / p.sum()


def test_faults_left_that_no_test_left_tells_apart_are_the_conclusion() -> None:
    # a blown fuse and an open feed differ only in the fuse's look: once that is answered,
    # nothing left tells them apart, and together they reach the threshold
    p = _left_with({"fuse.blown": 0.6, "feed.open": 0.38})
    rest = [t for t, info in enumerate(TABLE.tests) if info.id != "look_fuse"]
    look = [t for t, info in enumerate(TABLE.tests) if info.id == "look_fuse"]
    best = float(gains(p, MODEL, rest).max())
    assert best < PlannerSettings().min_gain_bits
    stop = stop_check(p, MODEL, rest, PlannerSettings(), best)
    assert stop is not None and stop.certain and stop.reason.startswith("no test can change the answer")
    ids = [TABLE.hypotheses[h].id for h in stop.group]
    assert ids[:2] == ["fuse.blown", "feed.open"]  # most probable first
    assert "feed.short_to_ground" in ids  # no test of the ruleset tells it from the blown fuse
    # the look at the fuse skipped rather than answered: it could still tell them apart
    stop = stop_check(p, MODEL, rest, PlannerSettings(), best, skipped=look)
    assert stop is not None and not stop.certain and stop.reason == "no test can change the answer"
    # spread over faults the tests left do tell apart: no group
    spread = _left_with({"fuse.blown": 0.5, "lamp.filament_open": 0.48})
    stop = stop_check(spread, MODEL, rest, PlannerSettings(min_gain_bits=5.0), 0.1)
    assert stop is not None and not stop.certain


def test_faults_no_test_can_tell_apart_form_a_group() -> None:
    names = [[TABLE.hypotheses[h].id for h in g] for g in ambiguity_groups(MODEL)]
    assert sorted(["fuse.blown", "feed.short_to_ground"]) in [sorted(g) for g in names]


def test_repairs_in_probability_over_cost_order() -> None:
    """P-over-C order (Kadane & Simon 1977): probability divided by repair minutes, descending."""
    steps = repair_order(PRIOR, MODEL)
    ratios = [s.probability / s.minutes for s in steps]
    assert ratios == sorted(ratios, reverse=True)
    assert "none" not in [s.fault_id for s in steps]


def test_diagnosis_reaches_the_blown_lamp_and_explains_in_numbers() -> None:
    d = Diagnosis.start(LOADED, TABLE, Context())
    first = d.next()
    assert isinstance(first, Proposal)
    assert first.why.expected and first.why.outcomes
    assert all(0 <= o.probability <= 1 for o in first.why.outcomes)
    assert "bits" in first.why.text() and "%" in first.why.text()
    answers = {"v_feed": Reading("12.60", value=12.60), "r_lamp": Reading("OL", overload=True),
               "drop_gnd": Reading("0.00", value=0.0), "look_fuse": Reading("no", outcome="no")}
    step = first
    for _ in range(4):
        if isinstance(step, Conclusion):
            break
        d = d.answer(step.test_id, answers[step.test_id])
        step = d.next()
    assert isinstance(step, Conclusion)
    assert step.diagnosis == "lamp.filament_open"
    assert step.probability >= 0.95
    assert step.repairs[0].fault_id == "lamp.filament_open"
    assert step.verification_test in ("v_feed", "r_lamp")


def test_blown_fuse_and_short_stop_as_a_group() -> None:
    d = Diagnosis.start(LOADED, TABLE, Context())
    d = d.answer("look_fuse", Reading("yes", outcome="yes")).answer("v_feed", Reading("0.00", value=0.0))
    end = d.next()
    assert isinstance(end, Conclusion)
    assert end.stopped_because == "threshold reached by faults no test can tell apart"
    assert set(end.group) == {"fuse.blown", "feed.short_to_ground"}
    assert end.group_probability >= 0.95
    # both repairs lead, in P-over-C order
    assert {r.fault_id for r in end.repairs[:2]} == {"fuse.blown", "feed.short_to_ground"}


@settings(max_examples=25, deadline=None)
@given(st.lists(st.tuples(st.sampled_from(["answer", "skip"]), st.floats(0, 13)), max_size=5))
def test_a_proposed_test_is_never_one_already_taken(moves: list) -> None:  # type: ignore[type-arg]
    """Property: the planner never proposes a test answered or skipped."""
    d = Diagnosis.start(LOADED, TABLE, Context())
    for move, value in moves:
        step = d.next()
        if isinstance(step, Conclusion):
            break
        taken = {t for t, _ in d.answered} | set(d.skipped)
        assert step.test_id not in taken
        test = TABLE.tests[TABLE.test_index(step.test_id)]
        if move == "skip":
            d = d.skip(step.test_id)
        elif test.kind == "observation":
            d = d.answer(step.test_id, Reading("no", outcome="no"))
        else:
            d = d.answer(step.test_id, Reading(f"{value:.2f}", value=round(value, 2)))


def test_choice_on_a_large_harness_picks_a_candidate() -> None:
    table = random_table(60, 40, seed=3)
    model = build_model(table)
    p = np.array([h.prior for h in table.hypotheses])
    choice = choose_test(p, model, list(range(5, 40)), PlannerSettings())
    assert choice is not None and 5 <= choice.test_index < 40
    assert choice.gain_bits > 0.5  # six levels split sixty hypotheses well


def test_state_change_minutes_favour_the_state_already_set() -> None:
    """With a charge for changing the operating state, a test in the current state wins a near tie."""
    from assistant.predict import TestInfo

    tests = (TestInfo("a_on", "voltage", "V", 2.0, "on"), TestInfo("b_off", "voltage", "V", 2.0, "off"))
    spec = {"none": {"a_on": (12.0, 0.05), "b_off": (12.0, 0.05)},
            "x.open": {"a_on": (0.0, 0.0), "b_off": (0.0, 0.0)}}
    from assistant.predict import Hypothesis
    from synthetic_tables import build_table

    table = build_table((Hypothesis("none", (), 0.5, "", 0.0), Hypothesis("x.open", ("x.open",), 0.5, "", 5.0)),
                        tests, spec)
    model = build_model(table)
    p = np.array([0.5, 0.5])
    charged = PlannerSettings(state_change_minutes=1.0)
    assert choose_test(p, model, [0, 1], charged, current_state="off").test_index == 1  # type: ignore[union-attr]
    assert choose_test(p, model, [0, 1], charged, current_state="on").test_index == 0  # type: ignore[union-attr]
