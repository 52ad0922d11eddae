"""Beliefs: the evidence model and the posterior, checked against pgmpy's exact inference."""

from __future__ import annotations

import math
import warnings
from dataclasses import replace

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from assistant.beliefs import build_model, entropy_bits, format_value, joint_widening, normalise_log, posterior
from assistant.errors import ReadingError
from assistant.predict import PredictionTable
from assistant.reading import Reading
from synthetic_tables import TINY_DEFAULT, TINY_SPEC, build_table, hypotheses_of, infos_of, seen_lamp, tiny_lamp

LOADED, TABLE = tiny_lamp()
MODEL = build_model(TABLE)
LOG_PRIOR = np.log(np.array([h.prior for h in TABLE.hypotheses]))


def _t(test_id: str) -> int:
    return TABLE.test_index(test_id)


def test_outcome_rows_are_distributions() -> None:
    for outcomes in MODEL.tests:
        shown = outcomes.probs[:, outcomes.probs.sum(axis=0) > 0]  # an empty "elsewhere" column aside
        assert shown.shape[1] >= outcomes.n_outcomes - 1
        assert np.all(shown > 0)  # the outlier floor: nothing is impossible
        np.testing.assert_allclose(outcomes.probs.sum(axis=1), 1.0, atol=1e-12)


def test_reading_in_the_predicted_bin_is_likely() -> None:
    outcomes = MODEL.tests[_t("v_feed")]
    lik = outcomes.likelihood(Reading("12.30", value=12.30))
    none, blown = TABLE.hypothesis_index("none"), TABLE.hypothesis_index("fuse.blown")
    assert lik[none] > 100 * lik[blown]
    # 0 V: the blown fuse and the open feed explain it, the healthy circuit does not
    lik0 = outcomes.likelihood(Reading("0.00", value=0.0))
    assert lik0[blown] > 100 * lik0[none]


def test_overload_reading_goes_to_the_ol_column() -> None:
    outcomes = MODEL.tests[_t("r_lamp")]
    lik = outcomes.likelihood(Reading("OL", overload=True))
    assert int(np.argmax(lik)) == TABLE.hypothesis_index("lamp.filament_open")


def test_one_wild_reading_leaves_the_true_fault_possible() -> None:
    # a probe that slipped: 5.3 V where no hypothesis predicts anything
    p = posterior(LOG_PRIOR, MODEL, [(_t("v_feed"), Reading("5.3", value=5.3)),
                                     (_t("r_lamp"), Reading("OL", overload=True))])
    assert p[TABLE.hypothesis_index("lamp.filament_open")] > 0.5


@pytest.mark.parametrize("test_id, reading, fragment", [
    ("v_feed", Reading("yes", outcome="yes"), "needs a meter reading in V"),  # an answer for a meter test
    ("look_fuse", Reading("3.2", value=3.2), "answered with one of"),  # a number for an observation
    ("look_fuse", Reading("maybe", outcome="maybe"), "not an answer"),
    ("v_feed", Reading("5000 V", value=5000.0), "beyond anything the meter can show"),
])
def test_readings_that_do_not_fit_the_test(test_id: str, reading: Reading, fragment: str) -> None:
    with pytest.raises(ReadingError, match=fragment):
        MODEL.tests[_t(test_id)].likelihood(reading)


def test_normalise_log_handles_ruled_out_and_refuses_all_ruled_out() -> None:
    p = normalise_log(np.array([-math.inf, 0.0, math.log(3.0)]))
    np.testing.assert_allclose(p, [0.0, 0.25, 0.75])
    with pytest.raises(ValueError):
        normalise_log(np.array([-math.inf, -math.inf]))


def test_entropy_bits_of_a_fair_coin() -> None:
    assert entropy_bits(np.array([0.5, 0.5])) == pytest.approx(1.0)


def test_format_value_follows_the_step() -> None:
    assert format_value(12.434, "V", 0.01) == "12.43 V"
    assert format_value(-0.0001, "V", 0.01) == "0.00 V"
    assert format_value(math.inf, "ohm", 0.1) == "OL"


def test_noise_free_model_is_one_hot_at_the_median() -> None:
    nf = build_model(TABLE, noise_free=True)
    outcomes = nf.tests[_t("v_feed")]
    none = TABLE.hypothesis_index("none")
    k = int(np.argmax(outcomes.probs[none]))
    assert outcomes.probs[none, k] == 1.0
    assert outcomes.centre(k) == pytest.approx(float(np.median(TABLE.samples[none, _t("v_feed")])), rel=0.002)


readings = st.one_of(
    st.floats(min_value=-20, max_value=20, allow_nan=False).map(lambda v: ("v", v)),
    st.just(("ol", None)),
)


@settings(max_examples=60, deadline=None)
@given(st.lists(st.tuples(st.sampled_from(["v_feed", "drop_gnd", "r_lamp", "look_fuse"]), readings,
                          st.sampled_from(["yes", "no"])), max_size=6))
def test_posterior_is_always_a_distribution(answers: list) -> None:  # type: ignore[type-arg]
    """Property: whatever the readings, the posterior is a distribution without NaN."""
    answered = []
    for test_id, (kind, value), outcome in answers:
        if test_id == "look_fuse":
            r = Reading(outcome, outcome=outcome)
        elif kind == "ol":
            r = Reading("OL", overload=True)
        else:
            r = Reading(str(value), value=value)
        answered.append((_t(test_id), r))
    p = posterior(LOG_PRIOR, MODEL, answered)
    assert not np.isnan(p).any()
    assert np.all(p >= 0)
    assert p.sum() == pytest.approx(1.0, abs=1e-12)


def test_posterior_equals_pgmpy_variable_elimination() -> None:
    """Reference: pgmpy VariableElimination (exact inference), to 1e-9, on the same model drawn as
    a Bayesian network: the hypothesis H, the simulated vehicle W (one of the table's Monte Carlo
    samples, uniform), a meter reading T given (H, W), an observation given H alone."""
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")  # pgmpy's own import-time deprecation notices
        from pgmpy.factors.discrete import TabularCPD
        from pgmpy.inference import VariableElimination
        from pgmpy.models import DiscreteBayesianNetwork

    answers = {"look_fuse": Reading("no", outcome="no"), "v_feed": Reading("12.52", value=12.52),
               "drop_gnd": Reading("0.01", value=0.01), "r_lamp": Reading("14.2", value=14.2)}
    prior = np.array([h.prior for h in TABLE.hypotheses])
    n_h, n_s = prior.size, TABLE.samples.shape[2]
    edges = []
    cpds = [TabularCPD("H", n_h, prior.reshape(n_h, 1)), TabularCPD("W", n_s, np.full((n_s, 1), 1.0 / n_s))]
    evidence = {}
    # three meter readings taken together: each kernel as wide as the posterior takes it
    widen = joint_widening(3, n_s)
    for test_id, reading in answers.items():
        t = _t(test_id)
        per_sample = MODEL.sample_likelihood(t, reading, widen)
        if per_sample is None:  # the observation: its answer given H
            outcomes = MODEL.tests[t]
            edges.append(("H", f"T_{test_id}"))
            cpds.append(TabularCPD(f"T_{test_id}", outcomes.n_outcomes, outcomes.probs.T,
                                   evidence=["H"], evidence_card=[n_h]))
            k = outcomes.outcome_index(reading)
            assert k is not None
            evidence[f"T_{test_id}"] = k
        else:  # a meter reading given (H, W): "this reading" or "any other", columns h * S + s
            like = per_sample.ravel()
            edges += [("H", f"T_{test_id}"), ("W", f"T_{test_id}")]
            cpds.append(TabularCPD(f"T_{test_id}", 2, np.stack([like, 1.0 - like]),
                                   evidence=["H", "W"], evidence_card=[n_h, n_s]))
            evidence[f"T_{test_id}"] = 0
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        net = DiscreteBayesianNetwork(edges)
        net.add_cpds(*cpds)
        result = VariableElimination(net).query(["H"], evidence=evidence, show_progress=False)
    assert widen > 1.0
    ours = posterior(np.log(prior), MODEL, [(_t(k), r) for k, r in answers.items()])
    np.testing.assert_allclose(ours, result.values, rtol=0, atol=1e-9)
    assert ours[TABLE.hypothesis_index("lamp.high_resistance")] > 0.9


def test_one_reading_alone_is_the_per_sample_mean() -> None:
    """The per-sample likelihoods of one reading average to the test's outcome column."""
    for test_id, reading in (("v_feed", Reading("12.52", value=12.52)), ("r_lamp", Reading("OL", overload=True)),
                             ("drop_gnd", Reading("0.01", value=0.01))):
        t = _t(test_id)
        per_sample = MODEL.sample_likelihood(t, reading)
        assert per_sample is not None
        np.testing.assert_allclose(per_sample.mean(axis=1), MODEL.tests[t].likelihood(reading), rtol=1e-6)
    assert MODEL.sample_likelihood(_t("look_fuse"), Reading("no", outcome="no")) is None


def _with_copy(table: PredictionTable, test_id: str) -> PredictionTable:
    """The table with a second test that reads exactly what ``test_id`` reads, sample by sample."""
    t = table.test_index(test_id)
    copy = replace(table.tests[t], id=f"{test_id}_again")

    def doubled(a: np.ndarray) -> np.ndarray:
        return np.concatenate([a, a[:, t:t + 1, :]], axis=1)

    return replace(table, tests=table.tests + (copy,), samples=doubled(table.samples),
                   sigma=doubled(table.sigma), resolution=doubled(table.resolution))


def test_two_readings_of_one_quantity_count_about_once() -> None:
    """Two meters on one quantity: under each sample the second reading adds only what the
    meter's error and the kernel leave open, so the log-likelihood ratio of two hypotheses with
    the same spread stays near the ratio of one reading (taken one by one, it would double)."""
    spec = dict(TINY_SPEC)
    spec["lamp.high_resistance"] = {**spec["lamp.high_resistance"], "drop_gnd": (3.0, 0.3)}
    spec["strap.high_resistance"] = {**spec["strap.high_resistance"], "drop_gnd": (3.6, 0.3)}
    table = _with_copy(build_table(hypotheses_of(LOADED), infos_of(LOADED), spec, default=TINY_DEFAULT),
                       "drop_gnd")
    model = build_model(table)
    reading = Reading("3.10", value=3.1)
    first, second = table.test_index("drop_gnd"), table.test_index("drop_gnd_again")
    once = model.log_likelihood([(first, reading)])
    twice = model.log_likelihood([(first, reading), (second, reading)])
    near, far = table.hypothesis_index("lamp.high_resistance"), table.hypothesis_index("strap.high_resistance")
    ratio_once, ratio_twice = once[near] - once[far], twice[near] - twice[far]
    assert ratio_once > 1.0  # 3.1 V is likelier around 3.0 V than around 3.6 V
    assert 0.0 < ratio_twice < 1.25 * ratio_once  # one by one: 2 * ratio_once


@pytest.mark.parametrize("d, constant", [(2, 1.0), (3, 0.969)])
def test_joint_widening_follows_the_normal_reference_rule(d: int, constant: float) -> None:
    """Silverman (1986), Table 4.1, from memory: the normal-reference bandwidth of the Gaussian
    product kernel is A(d) n^(-1/(d+4)) standard deviations, A = 1.059 in one dimension, 1.0 in
    two, 0.969 in three."""
    n = 64
    expected = constant * n ** (-1 / (d + 4)) / (1.059 * n ** -0.2)
    assert joint_widening(d, n) == pytest.approx(expected, rel=2e-3)
    assert joint_widening(1, n) == 1.0 and joint_widening(0, n) == 1.0


def test_a_seen_answer_is_taken_sample_by_sample() -> None:
    """A look that follows the circuit is judged per Monte Carlo sample: its per-sample
    likelihoods average to its outcome row, and joined with a meter reading of the same
    vehicle it counts only the samples both fit (the particle estimate: Doucet et al. 2001)."""
    _, table = seen_lamp()
    model = build_model(table)
    look, volts = table.test_index("look"), table.test_index("v_l")
    h = table.hypothesis_index("lamp.high_resistance")
    answers = table.samples[h, look, :]
    assert 0 < (answers == 1).sum() < answers.size  # a corroded holder: some lamps still lit, some out
    out = Reading("out", outcome="out")
    per_sample = model.sample_likelihood(look, out)
    assert per_sample is not None and model.tests[look].follows_samples
    np.testing.assert_allclose(per_sample.mean(axis=1), model.tests[look].likelihood(out), rtol=1e-9)
    # the lamp's ground side reads its current times the ground's resistance: the largest
    # reading among the lit samples is a vehicle whose lamp plainly lights
    lit_samples = np.nonzero(answers == 0)[0]
    small = lit_samples[int(np.argmax(table.samples[h, volts, lit_samples]))]
    reading = Reading("", value=float(table.samples[h, volts, small]))
    joint = model.log_likelihood([(look, out), (volts, reading)])[h]
    apart = (np.log(model.tests[look].likelihood(out)) + model.log_likelihood([(volts, reading)]))[h]
    assert joint < apart  # taken apart, "out" would count as if any vehicle could show it
