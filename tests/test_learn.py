"""Dirichlet (additive) smoothing of fault weights from repair counts.

References: the Dirichlet-multinomial posterior mean E[p_i | n] = (alpha_i + n_i) / (alpha_0 + N)
(Murphy, *Machine Learning: A Probabilistic Perspective*, 2012, section 3.4; Gelman et al.,
*Bayesian Data Analysis*, 3rd ed., section 3.4), and scipy.stats.dirichlet(...).mean() as an
independent implementation of the mean of the posterior Dirichlet(alpha + n).
"""

from __future__ import annotations

import datetime as dt

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy import stats

from assistant.history import Repair
from assistant.learn import dirichlet_posterior_mean, learn, smoothed_weights
from assistant.ruleset import fault_list, load_ruleset

STOP_LAMPS = "rulesets/lamp/stop_lamps.yaml"


def test_worked_example_by_hand() -> None:
    # Weights 2:1:1 with strength 4 give alpha = (2, 1, 1); counts (3, 0, 1), N = 4.
    # Closed form (Murphy 2012, section 3.4): mean = (2+3, 1+0, 1+1) / (4 + 4) = (5/8, 1/8, 2/8);
    # times the kept total 4: weights (2.5, 0.5, 1.0).
    new = smoothed_weights({"a": 2.0, "b": 1.0, "c": 1.0}, {"a": 3, "c": 1}, strength=4.0)
    assert new == pytest.approx({"a": 2.5, "b": 0.5, "c": 1.0}, rel=1e-12)


def test_posterior_mean_matches_scipy_dirichlet() -> None:
    alpha = {"x": 0.7, "y": 2.3, "z": 5.0, "w": 0.05}
    counts = {"x": 4, "z": 1, "w": 30}
    ours = dirichlet_posterior_mean(alpha, counts)
    # independent reference: scipy.stats.dirichlet(alpha + n).mean()
    ref = stats.dirichlet(np.array([alpha[k] + counts.get(k, 0) for k in alpha])).mean()
    assert [ours[k] for k in alpha] == pytest.approx(list(ref), rel=1e-12)


@settings(max_examples=60, deadline=None)
@given(
    weights=st.lists(st.floats(0.01, 10.0), min_size=2, max_size=12),
    data=st.data(),
    strength=st.floats(0.1, 100.0),
)
def test_smoothing_agrees_with_scipy_and_keeps_the_total(weights: list[float], data: st.DataObject,
                                                          strength: float) -> None:
    keys = [f"c{i}.open" for i in range(len(weights))]
    w = dict(zip(keys, weights))
    counts = {k: data.draw(st.integers(0, 40)) for k in keys}
    new = smoothed_weights(w, counts, strength)
    total = sum(weights)
    alpha = np.array(weights) * strength / total
    ref = stats.dirichlet(alpha + np.array([counts[k] for k in keys])).mean() * total  # scipy reference
    assert [new[k] for k in keys] == pytest.approx(list(ref), rel=1e-9)
    assert sum(new.values()) == pytest.approx(total, rel=1e-9)
    assert all(v > 0 for v in new.values())  # a fault never repaired keeps a positive weight


def test_no_counts_leave_the_weights_unchanged() -> None:
    w = {"a.open": 0.3, "b.open": 1.2}
    assert smoothed_weights(w, {}) == pytest.approx(w, rel=1e-12)


def test_one_repair_does_not_drown_the_rest() -> None:
    w = {f"c{i}.open": 1.0 for i in range(10)}
    new = smoothed_weights(w, {"c0.open": 1})  # default strength: one pseudo-repair per fault
    # (1 + 1) / (10 + 1) of the total 10: 1.818..., the others (1 / 11) * 10 = 0.909...
    assert new["c0.open"] == pytest.approx(20 / 11)
    assert new["c1.open"] == pytest.approx(10 / 11)


@pytest.mark.parametrize("alpha, counts", [
    ({"a": 0.0, "b": 1.0}, {}),  # a zero parameter is not a Dirichlet
    ({"a": 1.0}, {"b": 2}),  # counts for a category with no prior
])
def test_bad_parameters_raise(alpha: dict[str, float], counts: dict[str, int]) -> None:
    with pytest.raises(ValueError):
        dirichlet_posterior_mean(alpha, counts)


def _repair(fault: str, ruleset: str = "stop_lamps", n: int = 0) -> Repair:
    return Repair(dt.date(2026, 3, 1), f"CV2-{n:03d}", ruleset, fault, None, f"h.csv:{n + 2}")


def test_learn_counts_this_ruleset_only_and_lists_what_it_could_not_count() -> None:
    rs = load_ruleset(STOP_LAMPS, beside=False).ruleset
    repairs = [_repair("lamp_left.filament_open", n=i) for i in range(30)]
    repairs += [
        _repair("lamp_lft.filament_open", n=30),  # a typo: unknown fault
        _repair("none", n=31),  # no fault found
        _repair("battery.discharged", ruleset="starter", n=32),  # another ruleset's repair
        _repair("lamp_left.seized", n=33),  # a lamp cannot seize
    ]
    result = learn(rs, repairs)
    assert result.repairs == 30
    assert result.counts == {"lamp_left.filament_open": 30}
    assert [(u.fault_id, u.reason) for u in result.uncounted] == [
        ("lamp_lft.filament_open", "unknown fault"),
        ("none", "no fault found"),
        ("lamp_left.seized", "not a fault mode of this ruleset"),
    ]
    faults = fault_list(rs)
    assert result.new["lamp_left.filament_open"] > 2 * result.old["lamp_left.filament_open"]
    assert all(result.new[f.id] < f.weight for f in faults if f.id != "lamp_left.filament_open")
    assert sum(result.new.values()) == pytest.approx(sum(f.weight for f in faults))
    assert set(result.changed()) == {f.id for f in faults}
