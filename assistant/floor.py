"""The floor: the least minutes any diagnosis must spend to name a fault at the threshold.

To end with hypothesis ``h`` at probability ``threshold`` or more, a diagnosis must have made
tests that tell ``h`` from enough of the others: the hypotheses no test made tells from ``h``
keep their share of the posterior, since every reading is (all but) as likely under them as
under ``h``. With ``q`` the total prior of those left untold,

    P(h | readings) <= prior(h) / (prior(h) + q),

so reaching the threshold needs ``q <= prior(h) (1 - threshold) / threshold``. The floor of
``h`` is the least cost of a set of tests (each preparation they need paid once) that leaves
no more than that untold: a weighted partial test cover, solved exactly as a small integer
programme (the test-cover problem: De Bontridder et al., Mathematical Programming 98, 2003,
from memory; HiGHS through ``scipy.optimize.milp``). Every diagnosis that names ``h`` at the
threshold, whatever order it takes its tests in, spends at least that much; the floors
weighted by the priors are a lower bound on the mean minutes of any planner that is always
right at the threshold.

It is a floor, not a target: it counts a test as telling two hypotheses apart whenever what
it shows differs under them at all (by ``told_above`` in total variation), as if one reading
of it settled the question. It knows the priors it is given (the command line gives them after
the rules that fire at the start), not a decision rule that rules faults out on a reading.
Where it stands high, the faults behind it need an expensive test whatever the planner does
(two faults in series on one wire, told apart only behind a trim panel); where the planner
stands far above it, noise is what the minutes go on.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np
from scipy.optimize import Bounds, LinearConstraint, milp

from assistant.beliefs import EvidenceModel
from assistant.planner import separation as separation_of

TOLD_ABOVE = 0.01  # total variation above which a test is counted as telling two hypotheses apart


@dataclass(frozen=True)
class Floor:
    """The least minutes to name one hypothesis at the threshold, and a cheapest set of tests
    (with the preparations they need) that can."""

    minutes: float
    tests: tuple[int, ...]
    preparations: tuple[str, ...]
    # for each of ``tests``, the hypotheses no other test of the ruleset tells from this one: why
    # that test cannot be left out (two opens in series on one wire, told apart only between them)
    only: tuple[tuple[int, ...], ...] = ()


def floors(separation: np.ndarray, priors: Sequence[float] | np.ndarray, costs: Sequence[float],
           prepare: Sequence[Sequence[tuple[str, float]]], threshold: float, *,
           together: Sequence[Sequence[int]] = (), told_above: float = TOLD_ABOVE) -> tuple[Floor | None, ...]:
    """The floor of every hypothesis (None for one with no prior).

    ``separation[t, a, b]``: total variation between what test ``t`` shows under ``a`` and
    ``b``; ``costs[t]``: the test's own minutes; ``prepare[t]``: the preparations it needs with
    their minutes. ``together``: groups of hypotheses a diagnosis may name together (the
    ambiguity groups the engine concludes as one); a member need not be told from its group.
    """
    sep = np.asarray(separation, dtype=float)
    p = np.asarray(priors, dtype=float)
    n_h = p.size
    group_of = {h: set(g) for g in together for h in g}
    refs = sorted({ref for needs in prepare for ref, _ in needs})
    prep_minutes = {ref: m for needs in prepare for ref, m in needs}
    told = sep > told_above  # (T, H, H)
    result: list[Floor | None] = []
    for h in range(n_h):
        if p[h] <= 0:
            result.append(None)
            continue
        own = group_of.get(h, {h})
        mine = float(p[sorted(own)].sum())
        others = [o for o in range(n_h) if o not in own and p[o] > 0]
        budget = mine * (1.0 - threshold) / threshold
        if float(p[others].sum()) <= budget + 1e-15:
            result.append(Floor(0.0, (), ()))
            continue
        cover = _cover(told[:, h, others], p[others], budget, costs, prepare, refs, prep_minutes)
        if cover is not None:
            tells = told[:, h, :]  # (T, H): what each test of the ruleset tells from h
            only = tuple(tuple(o for o in others if tells[t, o] and tells[:, o].sum() == 1)
                         for t in cover.tests)
            cover = Floor(cover.minutes, cover.tests, cover.preparations, only)
        result.append(cover)
    return tuple(result)


def model_floors(model: EvidenceModel, priors: Sequence[float] | np.ndarray, threshold: float, *,
                 together: Sequence[Sequence[int]] = (), sep: np.ndarray | None = None) -> tuple[Floor | None, ...]:
    """:func:`floors` of an evidence model's hypotheses, from its outcome models and its table's
    test minutes and preparations; ``sep``: its separation matrix where already computed."""
    tests = model.table.tests
    return floors(separation_of(model) if sep is None else sep, priors, [t.cost_minutes for t in tests],
                  [t.prepare for t in tests], threshold, together=together)


def weighted_floor(minutes: Sequence[float | None], priors: Sequence[float] | np.ndarray) -> float | None:
    """The floors weighted by the priors: a lower bound on the mean minutes of any diagnosis
    that names every fault at the threshold. A fault no set of tests can name there (None)
    counts 0, which keeps it a lower bound; None when no fault has a floor."""
    if all(m is None for m in minutes):
        return None
    total = float(np.sum(priors))
    if total <= 0:
        return None
    return sum(float(p) * m for p, m in zip(priors, minutes, strict=True) if m is not None) / total


def _cover(told: np.ndarray, weights: np.ndarray, budget: float, costs: Sequence[float],
           prepare: Sequence[Sequence[tuple[str, float]]], refs: list[str],
           prep_minutes: dict[str, float]) -> Floor | None:
    """The cheapest tests (and preparations) that tell apart all but ``budget`` of ``weights``.

    Variables: x[t] (test made, binary), y[j] (preparation made, binary), z[o] (hypothesis
    ``o`` left untold, in [0, 1]). Minimise the minutes subject to z[o] + sum of the x[t] that
    tell ``o`` >= 1, sum of weights[o] z[o] <= budget, and x[t] <= y[j] for every preparation
    ``j`` test ``t`` needs. None if even every test together cannot.
    """
    n_t, n_o = told.shape
    n_j = len(refs)
    n = n_t + n_j + n_o
    c = np.concatenate([np.asarray(costs, dtype=float), [prep_minutes[r] for r in refs], np.zeros(n_o)])
    rows: list[np.ndarray] = []
    lo: list[float] = []
    hi: list[float] = []
    for o in range(n_o):  # z[o] + sum_t told[t, o] x[t] >= 1
        row = np.zeros(n)
        row[:n_t] = told[:, o]
        row[n_t + n_j + o] = 1.0
        rows.append(row)
        lo.append(1.0)
        hi.append(np.inf)
    row = np.zeros(n)  # what is left untold stays within the budget
    row[n_t + n_j:] = weights
    rows.append(row)
    lo.append(-np.inf)
    hi.append(budget)
    index = {r: i for i, r in enumerate(refs)}
    for t, needs in enumerate(prepare):  # x[t] <= y[j]
        for ref, _ in needs:
            row = np.zeros(n)
            row[t] = 1.0
            row[n_t + index[ref]] = -1.0
            rows.append(row)
            lo.append(-np.inf)
            hi.append(0.0)
    integrality = np.concatenate([np.ones(n_t + n_j), np.zeros(n_o)])
    solved = milp(c, constraints=LinearConstraint(np.array(rows), lo, hi), integrality=integrality,
                  bounds=Bounds(np.zeros(n), np.ones(n)))
    if not solved.success or solved.x is None:
        return None
    x = solved.x
    tests = tuple(t for t in range(n_t) if x[t] > 0.5)
    preps = tuple(r for r in refs if x[n_t + index[r]] > 0.5)
    minutes = sum(float(costs[t]) for t in tests) + sum(prep_minutes[r] for r in preps)
    return Floor(minutes, tests, preps)
