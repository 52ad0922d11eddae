"""Numbers that must not lie: the belief stays a distribution and the tool says what is wrong.

End to end, from ruleset files through predict() and the diagnosis engine: faults no test
can tell apart, a reading that no hypothesis explains, zero and missing priors, a test that
costs no time. Each case checks that the posterior is finite, non-negative and sums to one
(or that nothing was started and a one-line error says why), and that the conclusion names
what cannot be known instead of inventing a certainty.
"""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from assistant.diagnosis import Conclusion, Context, Diagnosis, Proposal
from assistant.errors import OhmtrailError, ReadingError, RulesetError
from assistant.predict import predict
from assistant.reading import Reading
from assistant.ruleset import load_ruleset
from assistant.ruleset.lint import lint_ruleset

TWINS = Path(__file__).parent / "data" / "reliability" / "twins.yaml"


@pytest.fixture(autouse=True)
def _own_cache(tmp_path: Path, monkeypatch: pytest.MonkeyPatch) -> None:
    monkeypatch.setenv("OHMTRAIL_CACHE", str(tmp_path / "cache"))


def _write(tmp_path: Path, old: str, new: str) -> Path:
    text = TWINS.read_text(encoding="utf-8")
    assert old in text
    path = tmp_path / "variant.yaml"
    path.write_text(text.replace(old, new, 1), encoding="utf-8")
    return path


def _assert_distribution(diagnosis: Diagnosis) -> np.ndarray:
    p = diagnosis.posterior()
    assert np.all(np.isfinite(p)) and np.all(p >= 0)
    assert math.isclose(float(p.sum()), 1.0, rel_tol=1e-9)
    ranking = diagnosis.ranking()
    assert math.isclose(sum(q for _, q in ranking), 1.0, rel_tol=1e-9)
    return p


def _start(path: Path, context: Context = Context()) -> Diagnosis:
    loaded = load_ruleset(path)
    assert lint_ruleset(loaded) == []
    return Diagnosis.start(loaded, predict(loaded, samples=32), context)


def test_faults_no_test_can_tell_apart_end_as_a_group_not_a_guess() -> None:
    diagnosis = _start(TWINS)
    step = diagnosis.next()
    assert isinstance(step, Proposal) and step.test_id == "v_lamp"
    diagnosis = diagnosis.answer("v_lamp", Reading("0.00", value=0.0))  # no feed at the lamp
    p = _assert_distribution(diagnosis)
    end = diagnosis.next()
    assert isinstance(end, Conclusion)
    ranking = dict(diagnosis.ranking())
    # the two opens share the belief (by their equal priors, as the evidence cannot split them)
    assert math.isclose(ranking["feed_a.open"], ranking["feed_b.open"], rel_tol=0.05)
    assert ranking["feed_a.open"] + ranking["feed_b.open"] > 0.95
    # neither is claimed certain on its own; the conclusion names both as one group
    assert end.probability < 0.95 or set(end.group) >= {"feed_a.open", "feed_b.open"}
    assert {"feed_a.open", "feed_b.open"} <= set(end.group)
    assert end.group_probability == pytest.approx(ranking["feed_a.open"] + ranking["feed_b.open"], rel=1e-6)
    assert end.stopped_because
    assert float(p.max()) < 0.95


def test_a_reading_no_hypothesis_explains_keeps_a_distribution_and_says_so() -> None:
    diagnosis = _start(TWINS)
    try:
        after = diagnosis.answer("v_lamp", Reading("48 V", value=48.0))  # more than the battery holds
    except ReadingError as exc:  # refused as impossible for this test: nothing taken in
        assert "\n" not in str(exc) and str(exc)
        _assert_distribution(diagnosis)
        return
    _assert_distribution(after)
    assert after.conflict is not None
    assert "v_lamp" in after.conflict.message and "re-measure" in after.conflict.message


def test_every_fault_weighted_zero_is_refused_before_anything_runs(tmp_path: Path) -> None:
    path = _write(tmp_path, "faults: {open: 1, short_to_ground: 0, short_to_power: 0, high_resistance: 0}}\n"
                  "  - {id: feed_b", "faults: {open: 0, short_to_ground: 0, short_to_power: 0, high_resistance: 0}}\n"
                  "  - {id: feed_b")
    path.write_text(path.read_text(encoding="utf-8")
                    .replace("faults: {open: 1, short_to_ground: 0, short_to_power: 0, high_resistance: 0}}\n"
                             "  - {id: lamp", "faults: {open: 0, short_to_ground: 0, short_to_power: 0, "
                             "high_resistance: 0}}\n  - {id: lamp")
                    .replace("filament_open: 1", "filament_open: 0"), encoding="utf-8")
    problems = lint_ruleset(load_ruleset(path))
    assert any("no fault with a positive weight" in str(p) for p in problems)


def test_a_missing_weight_is_a_located_error(tmp_path: Path) -> None:
    path = _write(tmp_path, "faults: {filament_open: 1,", "faults: {filament_open: {description: no weight},")
    with pytest.raises(RulesetError) as info:
        load_ruleset(path)
    line = next(n for n, text in enumerate(path.read_text(encoding="utf-8").split("\n"), 1) if "no weight" in text)
    assert "weight: required field is missing" in str(info.value) and info.value.line == line


def test_zero_prior_for_no_fault_still_gives_a_distribution(tmp_path: Path) -> None:
    diagnosis = _start(_write(tmp_path, "none_weight: 1", "none_weight: 0"))
    p = _assert_distribution(diagnosis)
    assert p[0] == 0.0  # "none" cannot be the answer when its prior is zero
    diagnosis = diagnosis.answer("v_lamp", Reading("12.5", value=12.5))  # a healthy feed
    p = _assert_distribution(diagnosis)
    assert p[0] == 0.0


def test_a_complaint_that_leaves_no_hypothesis_is_one_line_not_a_crash(tmp_path: Path) -> None:
    # The complaint points only at the battery, whose modes are all switched off, and gives
    # every other fault (and "none") a factor of 0: nothing is left to believe in. Lint
    # passes (a component is a valid suspect), so the engine must say so itself.
    path = _write(tmp_path, "states:\n", "complaints:\n  - {id: flat, text: Nothing works, suspects: [battery], "
                  "others: 0}\nstates:\n")
    loaded = load_ruleset(path)
    table = predict(loaded, samples=32)
    with pytest.raises(OhmtrailError) as info:
        Diagnosis.start(loaded, table, Context(complaint="flat"))
    assert "\n" not in str(info.value) and "flat" in str(info.value)


@pytest.mark.parametrize("cost", ["0 min", "0", "-2 min"])
def test_a_test_costing_no_time_is_a_located_error(tmp_path: Path, cost: str) -> None:
    path = _write(tmp_path, "state: on, cost: 2 min}", f"state: on, cost: {cost}}}")
    with pytest.raises(RulesetError) as info:
        load_ruleset(path)
    assert "cost" in str(info.value) and info.value.line is not None


def test_a_nearly_free_test_keeps_the_numbers_finite(tmp_path: Path) -> None:
    diagnosis = _start(_write(tmp_path, "state: on, cost: 2 min}", "state: on, cost: 0.0001 min}"))
    step = diagnosis.next()
    assert isinstance(step, Proposal)
    assert math.isfinite(step.gain_bits) and step.gain_bits >= 0 and math.isfinite(step.cost_minutes)


