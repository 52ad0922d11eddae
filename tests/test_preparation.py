"""Preparations: access work that tests share, paid once per diagnosis (assistant/preparation.py).

The starter ruleset's relay-breakout and cranking set-ups are the example; the figures they are
checked against are read from the ruleset itself, not typed in twice.
"""

from __future__ import annotations

import dataclasses
from collections.abc import Callable
from pathlib import Path

import numpy as np
import pytest

from assistant import predict as predictions
from assistant import preparation
from assistant.baselines import linear_walk, optimal_cost, voltage_path
from assistant.beliefs import build_model
from assistant.diagnosis import Conclusion, Context, Diagnosis
from assistant.page import PageMaker, render_page
from assistant.planner import PlannerSettings, choose_test
from assistant.predict import PredictionTable, predict
from assistant.reading import Reading
from assistant.preparation import made_by, pending, sequence_minutes
from assistant.ruleset import lint_ruleset, load_ruleset
from assistant.simulate import draw_reading, finish
from synthetic_tables import random_table

STARTER_PATH = Path(__file__).resolve().parent.parent / "rulesets" / "starter" / "starter.yaml"
STARTER = load_ruleset(STARTER_PATH)
TABLE = predict(STARTER)
PREP = {name: p.cost for name, p in STARTER.ruleset.preparations.items()}
SPEC = {t.id: t for t in STARTER.ruleset.tests}


def _info(test_id: str) -> predictions.TestInfo:
    return TABLE.tests[TABLE.test_index(test_id)]


def test_the_first_test_that_needs_a_preparation_pays_for_it() -> None:
    v86, v85 = _info("v_k8_86"), _info("v_k8_85")
    assert SPEC["v_k8_86"].prepare == ("crank_setup", "k8_breakout")
    assert preparation.test_minutes(v86) == pytest.approx(SPEC["v_k8_86"].cost + PREP["crank_setup"] + PREP["k8_breakout"])
    made = made_by(TABLE, [TABLE.test_index("v_k8_86")])
    assert made == {"crank_setup", "k8_breakout"}
    assert pending(v85, made) == ()
    assert preparation.test_minutes(v85, made) == pytest.approx(SPEC["v_k8_85"].cost)
    # a battery test made first leaves only the breakout to pay for at the relay
    after_battery = made_by(TABLE, [TABLE.test_index("v_crank_batt")])
    assert pending(v86, after_battery) == (("k8_breakout", PREP["k8_breakout"]),)
    order = [TABLE.test_index(t) for t in ("v_crank_batt", "v_k8_86", "v_k8_85", "v_k8_87")]
    assert sequence_minutes(TABLE, order) == pytest.approx(
        PREP["crank_setup"] + PREP["k8_breakout"] + sum(SPEC[TABLE.tests[t].id].cost for t in order))


def test_a_test_without_preparations_costs_its_own_minutes() -> None:
    look = _info("look_fuses")
    assert look.prepare == ()
    assert preparation.test_minutes(look, frozenset({"k8_breakout"})) == look.cost_minutes


def _twin_table(prepare_a: tuple[tuple[str, float], ...], prepare_b: tuple[tuple[str, float], ...]) -> PredictionTable:
    """Two tests that read exactly alike under every hypothesis, each with its own preparations."""
    base = random_table(6, 1, seed=3)
    tests = (predictions.TestInfo("a", "voltage", "V", 1.0, None, prepare=prepare_a),
             predictions.TestInfo("b", "voltage", "V", 1.0, None, prepare=prepare_b))
    twice = np.repeat(base.samples, 2, axis=1)
    return PredictionTable("twins", "2" * 64, base.hypotheses, tests, twice,
                           np.repeat(base.sigma, 2, axis=1), np.repeat(base.resolution, 2, axis=1), {})


def test_the_planner_takes_the_twin_whose_access_is_already_open() -> None:
    table = _twin_table((("panel", 4.0),), (("relay", 4.0),))
    model = build_model(table)
    p = np.array([h.prior for h in table.hypotheses])
    p = p / p.sum()
    for made, expected in ((frozenset({"panel"}), 0), (frozenset({"relay"}), 1)):
        choice = choose_test(p, model, [0, 1], PlannerSettings(), made=made)
        assert choice is not None and choice.test_index == expected
        assert choice.cost_minutes == pytest.approx(1.0)
    neither = choose_test(p, model, [0, 1], PlannerSettings())
    assert neither is not None and neither.cost_minutes == pytest.approx(5.0)


def test_every_proposal_costs_its_own_minutes_plus_the_preparations_still_to_make() -> None:
    # a simulated slow crank on a corroded main positive cable: the planner takes the drops while
    # cranking, the later ones with the cranking set-up and the intake duct already made
    rng = np.random.default_rng(5)
    h = TABLE.hypothesis_index("cable_pos.high_resistance")
    state = Diagnosis.start(STARTER, TABLE, Context(), widen_to_pairs=False)
    seen_prepared = False
    for _ in range(len(TABLE.tests)):
        step = state.next(explain_choice=False)
        if isinstance(step, Conclusion):
            break
        info = _info(step.test_id)
        made = made_by(TABLE, [TABLE.test_index(t) for t, _ in state.answered])
        assert state.preparations_made() == made
        assert step.prepare == pending(info, made)
        assert step.cost_minutes == pytest.approx(info.cost_minutes + sum(m for _, m in step.prepare))
        seen_prepared |= bool(info.prepare) and not step.prepare
        state = state.answer(step.test_id, draw_reading(TABLE, h, TABLE.test_index(step.test_id), rng))
    else:
        pytest.fail("the diagnosis did not conclude")
    assert seen_prepared, "no test was proposed with its preparations already made"


def test_the_walks_pay_each_preparation_once() -> None:
    # 6 V is bad at every point of the starter's walk (about 11 V on the feed, 0 V past the relay
    # coil), so the walk reads them all: their own minutes, and each preparation they need once
    path = voltage_path(STARTER.ruleset, TABLE)
    walk = linear_walk(TABLE, path, lambda t: Reading("6.00", value=6.0))
    walked = [SPEC[TABLE.tests[t].id] for t in walk.tests]
    assert len(walk.tests) == len(path) and len(walked) > 2
    needed = {ref for spec in walked for ref in spec.prepare}
    assert "crank_setup" in needed
    assert walk.minutes == pytest.approx(sum(spec.cost for spec in walked) + sum(PREP[ref] for ref in needed))


def test_a_finished_walk_pays_no_preparation_twice() -> None:
    # a corroded ground strap: the walk reads the clutch-switch input while cranking (good, the
    # control circuit is sound) and stops there, with the cranking set-up made; the planner then
    # carries on with the drops, which are made while cranking too, and must not pay for it again
    start = Diagnosis.start(STARTER, TABLE, Context(), widen_to_pairs=False)
    rng = np.random.default_rng(3)
    h = TABLE.hypothesis_index("strap.high_resistance")
    draws = {t: draw_reading(TABLE, h, t, rng, sample=0) for t in range(len(TABLE.tests))}
    walk = linear_walk(TABLE, voltage_path(STARTER.ruleset, TABLE), lambda t: draws[t])
    walk_made = made_by(TABLE, walk.tests)
    assert "crank_setup" in walk_made
    asked: list[int] = []

    def read(t: int) -> Reading:
        asked.append(t)
        return draws[t]

    more = finish(start, TABLE, walk, draws, read)
    assert more.tests == len(asked) >= 1
    assert any(set(r for r, _ in TABLE.tests[t].prepare) & walk_made for t in asked)
    assert walk.minutes + more.minutes == pytest.approx(sequence_minutes(TABLE, [*walk.tests, *asked]))
    assert more.conclusion.diagnosis == "strap.high_resistance"


def test_the_optimum_pays_each_preparation_once() -> None:
    # Four equally likely faults. A and B split them two ways for a minute each once panel P
    # (3 min) is off; C and D split them the same two ways for 3 min each without it. Every order
    # needs two tests: C then D costs 6, A then B costs 3 + 1 + 1 = 5, and that is the optimum.
    # Without preparations, A then B would cost 2 (worked by hand).
    outcomes = np.array([[0, 0, 0, 0], [0, 1, 0, 1], [1, 0, 1, 0], [1, 1, 1, 1]])
    priors = np.full(4, 0.25)
    costs = [1.0, 1.0, 3.0, 3.0]
    prepare = [(("P", 3.0),), (("P", 3.0),), (), ()]
    assert optimal_cost(outcomes, priors, costs, 0.95, prepare=prepare) == pytest.approx(5.0)
    assert optimal_cost(outcomes, priors, costs, 0.95) == pytest.approx(2.0)


def test_the_page_says_what_to_prepare_and_counts_it_in_the_cost() -> None:
    pages = PageMaker(STARTER, TABLE, None)
    first = pages.page("drop_solenoid")
    duct = STARTER.ruleset.preparations["intake_duct_off"]
    assert first.cost_minutes == pytest.approx(preparation.test_minutes(_info("drop_solenoid")))
    assert any(line.startswith(f"{duct.title} ({duct.cost:g} min)") for line in first.prepare)
    assert duct.cautions[0] in first.cautions
    text = render_page(_question(pages, first))
    assert f"First: {duct.title}" in text and f"Cost: about {first.cost_minutes:g} min" in text
    later = pages.page("drop_solenoid", made=frozenset({"intake_duct_off", "crank_setup"}))
    assert later.prepare == () and later.cost_minutes == pytest.approx(SPEC["drop_solenoid"].cost)
    assert duct.cautions[0] in later.cautions  # the duct is still off: its caution still stands


def _question(pages: PageMaker, page):  # type: ignore[no-untyped-def]
    return dataclasses.replace(pages.test_question("drop_solenoid"), page=page)


@pytest.mark.parametrize("change, message, line_of", [
    (lambda text: text.replace("prepare: [crank_setup, k8_breakout]", "prepare: [crank_setup, k8_brekout]", 1),
     "unknown preparation 'k8_brekout'", "k8_brekout"),
    (lambda text: text.replace("preparations:\n", "preparations:\n  spare_panel:\n    title: A panel no test "
                               "needs\n    cost: 1 min\n", 1),
     "preparation 'spare_panel' is needed by no test", "spare_panel:"),
])
def test_lint_names_bad_preparations_where_they_are(tmp_path: Path, change: Callable[[str], str], message: str,
                                                    line_of: str) -> None:
    text = change(STARTER_PATH.read_text(encoding="utf-8"))
    path = tmp_path / "starter.yaml"
    path.write_text(text, encoding="utf-8")
    problems = lint_ruleset(load_ruleset(path))
    assert [p.message for p in problems] == [message]
    expected_line = next(n for n, line in enumerate(text.splitlines(), 1) if line_of in line)
    assert problems[0].line == expected_line


def test_a_preparation_needs_a_title_and_positive_minutes(tmp_path: Path) -> None:
    from assistant.errors import RulesetError

    text = STARTER_PATH.read_text(encoding="utf-8").replace(
        "  k8_breakout:\n    title: Relay K8 on a breakout lead\n    cost: 2 min", "  k8_breakout:\n    cost: 0 min", 1)
    path = tmp_path / "starter.yaml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(RulesetError) as err:
        load_ruleset(path)
    found = [str(p) for p in err.value.problems]
    assert any("preparations.k8_breakout.title: required field is missing" in p for p in found)
    assert any("preparations.k8_breakout.cost" in p for p in found)
