"""The planner: which test to make next, when to stop, what to repair first, and why.

The next test maximises expected information gain per minute (Pattipati & Alexandridis,
IEEE Trans. SMC 20(4), 1990): the mutual information between the hypothesis and the test's
outcome, in bits, over the test's cost. The outcomes are the display bins of the evidence
model (``beliefs.py``), so a test whose predicted readings overlap under two suspects separates
them only as far as the meter can tell them apart (de Kleer & Williams 1987 choose the test of
minimum expected entropy; the gain is the same quantity seen from the other side).

A test's minutes are its own plus the preparations it needs that no earlier test has made
(``preparation.py``), so the planner favours the tests whose access is already open.

It stops when the leading hypothesis reaches the threshold (0.95 by default), or when the
leading hypothesis and the faults no test can tell from it reach it together, or when no test
left gains more than ``min_gain_bits``. What is left is ranked by probability over repair
minutes (the P-over-C order: Kadane & Simon, Annals of Statistics, 1977; Heckerman, Breese &
Rommelse, CACM 38(3), 1995).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from weakref import WeakKeyDictionary

import numpy as np

from assistant.beliefs import EvidenceModel, TestOutcomes, format_value
from assistant.disjoint import DisjointSets
from assistant.preparation import test_minutes

ALIVE = 1e-10  # hypotheses below this probability are left out of the gain sums
AMBIGUITY_TOLERANCE = 0.25  # total-variation distance under which two rows count as the same


@dataclass(frozen=True)
class PlannerSettings:
    """The planner's knobs."""

    threshold: float = 0.95
    min_gain_bits: float = 0.02  # a test gaining less than this cannot change the answer
    recommend_boost: float = 1.25  # gain-per-minute bonus of a test a rule recommends
    state_change_minutes: float = 0.0  # extra minutes charged for changing the operating state
    ambiguity_tolerance: float = AMBIGUITY_TOLERANCE


@dataclass(frozen=True)
class Expectation:
    """What the meter should show for one suspect."""

    hypothesis: str
    probability: float  # the suspect's probability now
    reading: str  # e.g. "12.41 V (12.33 to 12.49 V)", "OL", "yes (95 %)"


@dataclass(frozen=True)
class OutcomeEffect:
    """One way the test can come out and what it would do to the ranking."""

    reading: str  # a range of displays, "OL", or an answer
    probability: float  # how likely that outcome is now
    ranking: tuple[tuple[str, float], ...]  # the top hypotheses afterwards


@dataclass(frozen=True)
class Why:
    """Why a test is proposed: the suspects it separates, their readings, each outcome's effect."""

    test_id: str
    gain_bits: float
    cost_minutes: float
    separates: tuple[str, ...]
    expected: tuple[Expectation, ...]
    outcomes: tuple[OutcomeEffect, ...]
    rule: str | None = None  # the rule that requires or recommends it

    def text(self) -> str:
        """The explanation as a few plain lines with the numbers."""
        lines = [f"{self.test_id}: {self.gain_bits:.2f} bits for {self.cost_minutes:g} min "
                 f"({self.gain_bits / self.cost_minutes:.3f} bits/min)"]
        if self.rule:
            lines.append(f"  asked for by rule '{self.rule}'")
        if self.separates:
            lines.append("  separates " + ", ".join(self.separates))
        for e in self.expected:
            lines.append(f"  if {e.hypothesis} ({e.probability:.0%}): reads {e.reading}")
        for o in self.outcomes:
            lead = ", ".join(f"{h} {p:.0%}" for h, p in o.ranking)
            lines.append(f"  reads {o.reading} ({o.probability:.0%} likely) -> {lead}")
        return "\n".join(lines)


@dataclass(frozen=True)
class RepairStep:
    """One repair of the P-over-C order."""

    fault_id: str
    probability: float
    action: str
    minutes: float


@dataclass(frozen=True)
class Choice:
    """The planner's pick among the candidate tests."""

    test_index: int
    gain_bits: float
    cost_minutes: float
    score: float


# --------------------------------------------------------------------------- information gain


def _alive(p: np.ndarray) -> np.ndarray:
    return np.nonzero(p > ALIVE)[0]


def expected_gain(p: np.ndarray, outcomes: TestOutcomes, alive: np.ndarray | None = None) -> float:
    """Mutual information (bits) between the hypothesis (distribution ``p``) and the outcome."""
    # I = sum_h q_h sum_k P_hk log P_hk - sum_k P_k log P_k, with the first sum kept per row
    q = np.where(p > ALIVE, p, 0.0) if alive is None else np.zeros_like(p)
    if alive is not None:
        q[alive] = p[alive]
    q = q / q.sum()
    pk = q @ outcomes.probs
    pk = pk[pk > 0]
    return max(0.0, float(q @ outcomes.row_negentropy - pk @ np.log2(pk)))


def gains(p: np.ndarray, model: EvidenceModel, tests: Sequence[int]) -> np.ndarray:
    """Expected information gain of each test in ``tests``."""
    alive = _alive(p)
    return np.array([expected_gain(p, model.tests[t], alive) for t in tests])


def outcome_posteriors(p: np.ndarray, outcomes: TestOutcomes) -> tuple[np.ndarray, np.ndarray]:
    """(P(outcome k), P(h | outcome k)) for every outcome: shapes (K,) and (K, H)."""
    joint = p[:, None] * outcomes.probs  # (H, K)
    pk = joint.sum(axis=0)
    post = (joint / np.where(pk > 0, pk, 1.0)[None, :]).T
    return pk, post


def choose_test(p: np.ndarray, model: EvidenceModel, candidates: Sequence[int],
                settings: PlannerSettings, *, current_state: str | None = None,
                recommended: Sequence[int] = (), made: frozenset[str] = frozenset()) -> Choice | None:
    """The candidate with the most expected gain per minute (None when there is none). ``made``:
    the preparations already made; a test's minutes include those it still needs."""
    if not candidates:
        return None
    g = gains(p, model, candidates)
    best: Choice | None = None
    best_key: tuple[float, float, int] | None = None
    for t, gain in zip(candidates, g):
        info = model.table.tests[t]
        cost = test_minutes(info, made) + (settings.state_change_minutes
                                           if current_state is not None and info.state not in (None, current_state)
                                           else 0.0)
        score = gain / cost
        if t in recommended:
            score *= settings.recommend_boost
        same_state = 1.0 if current_state is not None and info.state == current_state else 0.0
        key = (round(score, 12), same_state, -t)
        if best_key is None or key > best_key:
            best_key, best = key, Choice(t, float(gain), cost, score)
    return best


# --------------------------------------------------------------------------- when to stop


def total_variation(a: np.ndarray, b: np.ndarray) -> np.ndarray:
    """Total-variation distance between rows of ``a`` and ``b`` (broadcast)."""
    return np.asarray(0.5 * np.abs(a - b).sum(axis=-1))


def separation(model: EvidenceModel) -> np.ndarray:
    """``sep[t, a, b]``: total-variation distance between what test ``t`` shows under ``a`` and ``b``."""
    n_h = model.n_hypotheses
    sep = np.zeros((len(model.tests), n_h, n_h))
    for t, outcomes in enumerate(model.tests):
        rows = outcomes.model
        sep[t] = total_variation(rows[:, None, :], rows[None, :, :])
    return sep


_FARTHEST: WeakKeyDictionary[EvidenceModel, dict[int, np.ndarray]] = WeakKeyDictionary()


def _farthest(model: EvidenceModel, h: int) -> np.ndarray:
    """Largest total-variation distance over all tests between ``h`` and each hypothesis (cached)."""
    cache = _FARTHEST.setdefault(model, {})
    found = cache.get(h)
    if found is None:
        found = np.zeros(model.n_hypotheses)
        for outcomes in model.tests:
            np.maximum(found, total_variation(outcomes.model, outcomes.model[h][None, :]), out=found)
        cache[h] = found
    return found


def indistinguishable(model: EvidenceModel, h: int, among: Sequence[int] | np.ndarray,
                      tests: Sequence[int] | None = None,
                      tolerance: float = AMBIGUITY_TOLERANCE) -> np.ndarray:
    """Those of ``among`` that no test in ``tests`` (default: all) tells apart from ``h``."""
    idx = np.asarray(among, dtype=int)
    if tests is None:
        return np.asarray(idx[_farthest(model, h)[idx] < tolerance])
    same = np.ones(idx.size, dtype=bool)
    for t in tests:
        rows = model.tests[t].model
        same &= total_variation(rows[idx], rows[h][None, :]) < tolerance
    return idx[same]


def ambiguity_groups(model: EvidenceModel, tolerance: float = AMBIGUITY_TOLERANCE) -> list[list[int]]:
    """Sets of hypotheses no test tells apart (each of two or more), joined transitively."""
    n = model.n_hypotheses
    sets: DisjointSets[int] = DisjointSets()
    for h in range(n):
        for other in indistinguishable(model, h, np.arange(h + 1, n), tolerance=tolerance):
            sets.union(int(other), h)
    groups: dict[int, list[int]] = {}
    for h in range(n):
        groups.setdefault(sets.find(h), []).append(h)
    return [g for g in groups.values() if len(g) > 1]


@dataclass(frozen=True)
class Stop:
    """Why the planner stops, and the leading hypothesis with the faults it cannot be told from."""

    reason: str
    certain: bool  # the threshold is reached (by the leader or with its indistinguishable group)
    group: tuple[int, ...]


def residual_group(p: np.ndarray, model: EvidenceModel, tests: Sequence[int],
                   settings: PlannerSettings) -> tuple[int, ...]:
    """The fewest most probable hypotheses that reach the threshold together, provided no test
    of ``tests`` tells any two of them apart (total-variation distance under the tolerance);
    else ``()``. Most probable first."""
    order = np.argsort(-p, kind="stable")
    total = np.cumsum(p[order])
    k = int(np.searchsorted(total, settings.threshold)) + 1
    if k > order.size or total[k - 1] < settings.threshold:
        return ()
    members = order[:k]
    for t in tests:
        rows = model.tests[t].model[members]
        if float(total_variation(rows[:, None, :], rows[None, :, :]).max()) >= settings.ambiguity_tolerance:
            return ()
    return tuple(int(h) for h in members)


def stop_check(p: np.ndarray, model: EvidenceModel, candidates: Sequence[int],
               settings: PlannerSettings, best_gain: float | None, *,
               skipped: Sequence[int] = ()) -> Stop | None:
    """A Stop if the planner should stop now, else None. ``best_gain``: the best candidate's gain;
    ``skipped``: the tests the technician could not make (they could still tell faults apart).

    When no test is left, or none can change the answer, and the most probable hypotheses reach
    the threshold together while no test left or skipped tells them apart, the stop is certain
    of that group: it is what the tests can resolve (see :func:`residual_group`)."""
    top = int(np.argmax(p))
    if p[top] >= settings.threshold:
        return Stop("threshold reached", True, (top,))
    group = indistinguishable(model, top, _alive(p), tolerance=settings.ambiguity_tolerance)
    if p[group].sum() >= settings.threshold and group.size > 1:
        ordered = tuple(int(h) for h in group[np.argsort(-p[group], kind="stable")])
        return Stop("threshold reached by faults no test can tell apart", True, ordered)
    if not candidates:
        reason = "no tests left"
    elif best_gain is not None and best_gain < settings.min_gain_bits:
        reason = "no test can change the answer"
    else:
        return None
    left = residual_group(p, model, [*candidates, *skipped], settings)
    if len(left) > 1:
        # with the faults no test of the ruleset tells from a member, however unlikely now
        alive = _alive(p)
        closed = set(left)
        for h in left:
            closed.update(int(x) for x in indistinguishable(model, h, alive, tolerance=settings.ambiguity_tolerance))
        left = left + tuple(sorted(closed - set(left), key=lambda h: -p[h]))
        hyps = model.table.hypotheses
        if any(not hyps[h].faults for h in left):  # "none" is one of them
            what = "no fault found beyond what the tests can resolve: no fault, or a fault left that no test left tells from it"
        else:
            what = "the faults left reach the threshold together and no test left tells them apart"
        return Stop(f"{reason}; {what}", True, left)
    return Stop(reason, False, (top,))


# --------------------------------------------------------------------------- after the stop


def repair_order(p: np.ndarray, model: EvidenceModel, *, first: Sequence[int] = (),
                 min_probability: float = 1e-3, limit: int = 8) -> tuple[RepairStep, ...]:
    """Repairs in probability-over-repair-minutes order (Kadane & Simon 1977); ``first`` leads."""
    hyps = model.table.hypotheses
    lead = [h for h in first if hyps[h].faults]
    rest = [h for h in np.argsort(-p, kind="stable")
            if hyps[h].faults and p[h] >= min_probability and h not in lead]
    rest.sort(key=lambda h: -p[h] / max(hyps[h].repair_minutes, 1e-9))
    lead.sort(key=lambda h: -p[h] / max(hyps[h].repair_minutes, 1e-9))
    return tuple(RepairStep(hyps[h].id, float(p[h]), hyps[h].repair, hyps[h].repair_minutes)
                 for h in (lead + rest)[:limit])


def verification_test(model: EvidenceModel, h: int, none_index: int = 0) -> str | None:
    """The test that best proves the repair of ``h``: the most different reading from "none",
    the cheaper of near ties."""
    if h == none_index:
        return None
    tv = np.array([float(total_variation(o.model[h], o.model[none_index])) for o in model.tests])
    if tv.size == 0 or tv.max() < 0.5:
        return None
    near = [t for t in range(tv.size) if tv[t] >= tv.max() - 0.05]
    best = min(near, key=lambda t: (model.table.tests[t].cost_minutes, -tv[t]))
    return model.table.tests[best].id


# --------------------------------------------------------------------------- why


def expected_reading(model: EvidenceModel, h: int, t: int) -> str:
    """What test ``t`` should show under hypothesis ``h``: median and 5-95 % range, or an answer."""
    outcomes = model.tests[t]
    info = model.table.tests[t]
    if outcomes.is_observation:
        row = outcomes.model[h]
        k = int(np.argmax(row))
        return f"{info.outcomes[k]} ({row[k]:.0%})"
    x = np.asarray(model.table.samples[h, t, :], dtype=float)
    over = float(np.isposinf(x).mean())
    fin = x[np.isfinite(x)]
    if fin.size == 0:
        return "OL" if over else "-OL"
    lo, med, hi = np.percentile(fin, [5, 50, 95])
    res = np.asarray(model.table.resolution[h, t, :], dtype=float)
    res = res[np.isfinite(res) & (res > 0)]
    step = float(np.median(res)) if res.size else None
    text = format_value(float(med), info.unit, step)
    if format_value(float(lo), info.unit, step) != format_value(float(hi), info.unit, step):
        text += f" ({format_value(float(lo), '', step)} to {format_value(float(hi), info.unit, step)})"
    if over >= 0.05:
        text += f", OL {over:.0%} of the time"
    return text


def _outcome_classes(p: np.ndarray, outcomes: TestOutcomes, ids: Sequence[str], top_n: int = 3,
                     limit: int = 6) -> tuple[OutcomeEffect, ...]:
    """Outcomes merged into runs of neighbouring bins after which the same hypothesis leads."""
    pk, post = outcome_posteriors(p, outcomes)
    leader = np.argmax(post, axis=1)
    classes: list[tuple[list[int], float]] = []
    k = 0
    n = outcomes.n_outcomes
    value_bins = 0 if outcomes.is_observation else outcomes.n_values
    while k < n:
        run = [k]
        if k < value_bins:
            while run[-1] + 1 < value_bins and leader[run[-1] + 1] == leader[k]:
                run.append(run[-1] + 1)
        classes.append((run, float(pk[run].sum())))
        k = run[-1] + 1
    effects: list[OutcomeEffect] = []
    for run, mass in sorted(classes, key=lambda c: -c[1]):
        if mass < 0.005 or len(effects) >= limit:
            continue
        weights = pk[run]
        after = (weights[:, None] * post[run]).sum(axis=0) / max(weights.sum(), 1e-300)
        order = np.argsort(-after, kind="stable")[:top_n]
        if len(run) == 1 or outcomes.is_observation:
            label = outcomes.label(run[0])
        else:
            step = outcomes.width(run[0])
            lo, hi = outcomes.bounds(run[0])[0], outcomes.bounds(run[-1])[1]
            unit = outcomes.test.unit
            label = f"{format_value(lo, '', step)} to {format_value(hi, unit, step)}"
        effects.append(OutcomeEffect(label, mass, tuple((ids[h], float(after[h])) for h in order)))
    return tuple(effects)


def explain(p: np.ndarray, model: EvidenceModel, choice: Choice, *, rule: str | None = None,
            suspects: int = 6) -> Why:
    """The reasons for a choice, in numbers."""
    t = choice.test_index
    outcomes = model.tests[t]
    hyps = model.table.hypotheses
    order = [int(h) for h in np.argsort(-p, kind="stable")[:suspects] if p[h] >= 0.01]
    rows = outcomes.model
    separated = [h for h in order
                 if any(float(total_variation(rows[h], rows[o])) >= 0.5 for o in order if o != h)]
    expected = tuple(Expectation(hyps[h].id, float(p[h]), expected_reading(model, h, t)) for h in order)
    return Why(
        test_id=model.table.tests[t].id,
        gain_bits=choice.gain_bits,
        cost_minutes=choice.cost_minutes,
        separates=tuple(hyps[h].id for h in separated),
        expected=expected,
        outcomes=_outcome_classes(p, outcomes, [h.id for h in hyps]),
        rule=rule,
    )


def entropy_after(p: np.ndarray, outcomes: TestOutcomes) -> float:
    """Expected entropy (bits) of the hypothesis after the test: the quantity de Kleer &
    Williams minimise."""
    pk, post = outcome_posteriors(p, outcomes)
    total = 0.0
    for k in range(pk.size):
        if pk[k] > 0:
            q = post[k][post[k] > 0]
            total += pk[k] * float(-(q * np.log2(q)).sum())
    return total
