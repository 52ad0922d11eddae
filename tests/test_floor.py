"""The floor: the least minutes any diagnosis must spend to name a fault at the threshold."""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np
import pytest

from assistant.baselines import optimal_cost
from assistant.coverage import fault_floors
from assistant.floor import floors
from assistant.overlay import apply_priors
from assistant.predict import predict
from assistant.ruleset import load_ruleset

@pytest.fixture(scope="module", autouse=True)
def _own_cache(tmp_path_factory: pytest.TempPathFactory) -> Iterator[None]:
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("OHMTRAIL_CACHE", str(tmp_path_factory.mktemp("cache")))
        yield


def _separation(outcomes: np.ndarray) -> np.ndarray:
    """``sep[t, a, b]`` of a noise-free problem: 1 where test ``t`` shows ``a`` and ``b`` differently."""
    out = np.asarray(outcomes)
    return (out.T[:, :, None] != out.T[:, None, :]).astype(float)


# none, a.open, b.open: t0 (1 min) tells none from both opens; t1 (2 min, behind a 3-minute
# panel) tells the two opens apart: two opens in series on one wire, told apart only at the
# point between them.
TWINS = np.array([[0, 0], [1, 0], [1, 1]])
TWIN_PREP = [[], [("panel_off", 3.0)]]


def test_twins_behind_a_panel_pay_for_the_panel() -> None:
    got = floors(_separation(TWINS), [0.5, 0.3, 0.2], [1.0, 2.0], TWIN_PREP, 0.95)
    # by hand: a.open must be told from none (0.5) and from b.open (0.2), each over its budget
    # 0.3 x 0.05 / 0.95 = 0.0158: t0 + t1 + the panel = 1 + 2 + 3 min
    assert got[1] is not None and got[1].minutes == pytest.approx(6.0)
    assert got[1].tests == (0, 1) and got[1].preparations == ("panel_off",)
    # t0 is the only test telling a.open from none, t1 the only one telling it from b.open
    assert got[1].only == ((0,), (2,))
    # none: t1 tells it from b.open too, so t0 is not the only test for b.open
    assert got[0].only == ((1,),)
    # b.open shows 1 on t1 where none and a.open show 0: t1 and the panel alone, 2 + 3 min
    assert got[2] is not None and got[2].minutes == pytest.approx(5.0) and got[2].tests == (1,)
    # none is told from both opens by t0 alone
    assert got[0] is not None and got[0].minutes == pytest.approx(1.0) and got[0].tests == (0,)


def test_a_twin_within_the_budget_need_not_be_told() -> None:
    # a.open's budget is 0.49 x 0.05 / 0.95 = 0.0258, more than b.open's 0.01: t0 is enough
    got = floors(_separation(TWINS), [0.5, 0.49, 0.01], [1.0, 2.0], TWIN_PREP, 0.95)
    assert got[1] is not None and got[1].minutes == pytest.approx(1.0)
    # b.open's own budget is tiny: it still needs t1 behind the panel
    assert got[2] is not None and got[2].minutes == pytest.approx(5.0)


def test_a_group_named_together_need_not_be_told_apart() -> None:
    got = floors(_separation(TWINS), [0.5, 0.3, 0.2], [1.0, 2.0], TWIN_PREP, 0.95, together=[[1, 2]])
    assert got[1] is not None and got[1].minutes == pytest.approx(1.0)


def test_a_prior_already_over_the_threshold_costs_nothing_and_none_without_prior() -> None:
    got = floors(_separation(TWINS), [0.97, 0.03, 0.0], [1.0, 2.0], TWIN_PREP, 0.95)
    assert got[0] is not None and got[0].minutes == 0.0 and got[0].tests == ()
    assert got[2] is None


def test_untellable_hypotheses_have_no_floor() -> None:
    same = np.array([[0], [0]])
    got = floors(_separation(same), [0.5, 0.5], [1.0], [[]], 0.95)
    assert got == (None, None)


@pytest.mark.parametrize("seed", range(25))
def test_the_weighted_floor_never_exceeds_the_exact_optimum(seed: int) -> None:
    """A lower bound: the exact optimum of the noise-free problem (memoised dynamic programming,
    Pattipati & Alexandridis, IEEE Trans. SMC 20(4), 1990), made to name every hypothesis
    (threshold 1), spends at least the floor on each, so its expected minutes are at least the
    prior-weighted floor. (Below 1 the optimum may stop on a hypothesis that already holds the
    threshold and name the others wrongly; the floor is for diagnoses that are right.)"""
    rng = np.random.default_rng(seed)
    n_h, n_t = int(rng.integers(3, 8)), int(rng.integers(2, 6))
    outcomes = rng.integers(0, 2, size=(n_h, n_t))
    outcomes = np.column_stack([outcomes, np.arange(n_h)])  # one costly test tells every one apart
    priors = rng.dirichlet(np.ones(n_h))
    costs = [float(c) for c in rng.integers(1, 5, size=n_t)] + [10.0]
    prepare: list[list[tuple[str, float]]] = [[("trim_off", 3.0)] if rng.random() < 0.4 else []
                                             for _ in range(n_t)] + [[]]
    got = floors(_separation(outcomes), priors, costs, prepare, 1.0)
    weighted = sum(float(priors[h]) * f.minutes for h, f in enumerate(got) if f is not None)
    best = optimal_cost(outcomes, priors, costs, 1.0, prepare=prepare)
    assert best is not None
    assert weighted <= best + 1e-9


def test_the_starter_key_switch_pays_for_the_column_shroud() -> None:
    # The key switch's start contact and the wire from it to relay K8 are two opens in series on
    # one branch: by Kirchhoff's laws every reading elsewhere is the same under both, and only
    # the voltage at the key switch's output tells them apart. That test is behind the column
    # shroud, so the floor of either fault includes it.
    loaded = load_ruleset("rulesets/starter/starter.yaml")
    table = apply_priors(predict(loaded, samples=16, seed=0), loaded.ruleset)
    got = fault_floors(table, loaded.ruleset.threshold)
    ids = [h.id for h in table.hypotheses]
    rs = loaded.ruleset
    v_key_st = next(t for t in rs.tests if t.id == "v_key_st")
    need = v_key_st.cost + sum(rs.preparations[ref].cost for ref in v_key_st.prepare)
    for fault in ("key_start.stuck_open", "w_key.open"):
        floor = got[ids.index(fault)]
        assert floor is not None
        assert [table.tests[t].id for t in floor.tests].count("v_key_st") == 1
        assert "column_shroud_off" in floor.preparations
        assert floor.minutes >= need
    # and each is the other's twin: v_key_st is the only test telling them apart
    key, wire = ids.index("key_start.stuck_open"), ids.index("w_key.open")
    floor = got[key]
    assert floor is not None
    only = dict(zip([table.tests[t].id for t in floor.tests], floor.only, strict=True))
    assert wire in only["v_key_st"]
