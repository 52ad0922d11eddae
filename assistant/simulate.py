"""Simulated diagnoses: how well and how fast the planner finds each fault, against baselines.

For every hypothesis and trial a full set of readings is drawn for one simulated vehicle (a
random Monte Carlo sample of the circuit plus the meter's error, shown at the meter's
resolution); the planner runs on them to its stop, and the linear walk and half-split run on
the very same draws. The walks stop short of a certain answer (the walk at its first good point,
whatever that leaves in doubt), so the linear walk is also finished: the planner carries on from
the walk's readings to its own stop, which gives the walk's minutes at the planner's certainty.
The vehicles come from a second Monte Carlo run of the circuit (the ``vehicles`` table, its own
seed), not from the samples the planner's evidence model was built from: the planner is scored
on vehicles it has not seen, as it would be in a workshop. Each draw has a random stream of its
own (:func:`reading_stream`). Then
the noise-free version of the problem (each hypothesis shows its median reading, binned as the
planner bins it) gives the planner's expected minutes and the exact optimum. Means are
weighted by the hypotheses' priors, and so is the floor (``assistant.floor``): the least minutes
any diagnosis that names each fault at the threshold can spend, noise aside. The tests a
decision rule asked for are counted rule by rule (:class:`RuleTests`), so that a fleet engineer
sees what a rule such as "fuses first" costs on the vehicles it fires for.
"""

from __future__ import annotations

import logging
import math
import zlib
from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from typing import Any

import numpy as np

from assistant.baselines import (
    WalkResult,
    half_split,
    linear_walk,
    noise_free_outcomes,
    optimal_cost,
    voltage_path,
    walk_readings,
)
from assistant.beliefs import EvidenceModel, build_model, format_value, posterior
from assistant.diagnosis import Conclusion, Context, Diagnosis, evidence_model
from assistant.errors import OhmtrailError
from assistant.floor import model_floors, weighted_floor
from assistant.planner import PlannerSettings, ambiguity_groups
from assistant.meter import MeterProfile
from assistant.predict import PredictionTable, predict
from assistant.reading import Reading
from assistant.ruleset.load import LoadedRuleset

log = logging.getLogger("ohmtrail.simulate")

Progress = Callable[[int, int], None]
OPTIMUM_SECONDS = 60.0
# The simulated vehicles' Monte Carlo seed is the model's plus this: a stream of part values and
# fault magnitudes the evidence model was not built from.
VEHICLE_SEED_OFFSET = 1_000_000


def vehicle_table(loaded: LoadedRuleset, meter: MeterProfile | None = None, *, samples: int = 64,
                  seed: int = 0) -> PredictionTable:
    """The simulated vehicles for a model predicted with ``seed``: the same circuit, meter and
    sample count, Monte Carlo seed ``seed`` + :data:`VEHICLE_SEED_OFFSET`. Every simulation that
    scores the planner (``simulate``, ``diagnose --simulate``, ``coverage``) draws from it."""
    return predict(loaded, meter, samples=samples, seed=seed + VEHICLE_SEED_OFFSET)


def vehicles_or(table: PredictionTable, vehicles: PredictionTable | None) -> PredictionTable:
    """The table to draw simulated vehicles from: ``vehicles``, which must list the same
    hypotheses and tests as ``table`` (ValueError if not), else ``table`` itself."""
    if vehicles is None:
        return table
    if ([h.id for h in vehicles.hypotheses] != [h.id for h in table.hypotheses]
            or [t.id for t in vehicles.tests] != [t.id for t in table.tests]):
        raise ValueError("the vehicles' table must have the same hypotheses and tests as the planner's")
    return vehicles


def reading_stream(seed: int, hypothesis_id: str, run: int, test_id: str = "") -> np.random.Generator:
    """The random stream of one simulated draw: with no ``test_id``, which Monte Carlo sample is
    the vehicle of run ``run`` under a hypothesis; with one, that test's reading on it.

    Keyed by the ids, so that adding, dropping or reordering tests or hypotheses leaves every
    other draw as it was (a ruleset edit changes the figures by what it changes, not by shifting
    one shared random sequence), and a reading does not depend on when in a run it is asked for.
    """
    return np.random.default_rng([seed, zlib.crc32(hypothesis_id.encode("utf-8")), run,
                                  zlib.crc32(test_id.encode("utf-8"))])


def draw_reading(table: PredictionTable, hypothesis_index: int, test_index: int,
                 rng: np.random.Generator, *, sample: int | None = None) -> Reading:
    """A reading as the meter would show it if the hypothesis were true.

    A random Monte Carlo sample (or ``sample``: the same one for every test of one simulated
    vehicle, so that one fault magnitude shows in all its readings), plus the meter's error (uniform within its accuracy bound,
    sqrt(3) standard uncertainties either side: JCGM 100:2008), quantised to the resolution of
    the range in use; OL for an overload. Observations are drawn from their outcome row; one
    that follows the circuit (``seen``) gives the answer the vehicle's sample shows, another
    answer with its ``misjudged`` chance.
    """
    info = table.tests[test_index]
    if info.kind == "observation" and info.misjudged is not None:
        # the answer the vehicle's own circuit shows, misjudged now and then
        k = len(info.outcomes)
        s = int(rng.integers(table.samples.shape[2])) if sample is None else sample
        shown = int(table.samples[hypothesis_index, test_index, s])
        if rng.random() < info.misjudged:
            shown = [j for j in range(k) if j != shown][int(rng.integers(k - 1))]
        return Reading(info.outcomes[shown], outcome=info.outcomes[shown])
    if info.kind == "observation":
        row = table.observations.get(test_index)
        k = len(info.outcomes)
        probs = np.full(k, 1.0 / k) if row is None else np.clip(np.asarray(row[hypothesis_index], float), 0, None)
        probs = probs / probs.sum() if probs.sum() > 0 else np.full(k, 1.0 / k)
        outcome = info.outcomes[int(rng.choice(k, p=probs))]
        return Reading(outcome, outcome=outcome)
    s = int(rng.integers(table.samples.shape[2])) if sample is None else sample
    x = float(table.samples[hypothesis_index, test_index, s])
    if math.isinf(x) or math.isnan(x):
        return Reading("-OL" if x < 0 else "OL", overload=True)
    sigma = float(np.nan_to_num(table.sigma[hypothesis_index, test_index, s]))
    step = float(table.resolution[hypothesis_index, test_index, s])
    half_width = sigma * math.sqrt(3.0)
    y = x + (float(rng.uniform(-half_width, half_width)) if half_width > 0 else 0.0)
    if step > 0:
        y = round(y / step) * step
    return Reading(format_value(y, info.unit, step), value=y)


@dataclass(frozen=True)
class Figures:
    """Accuracy, tests and minutes of one strategy, prior-weighted."""

    accuracy: float
    mean_tests: float
    mean_minutes: float


@dataclass(frozen=True)
class RuleTests:
    """The tests one decision rule asked for (required first or recommended) and the planner
    made, prior-weighted over the simulated runs: a fleet engineer's view of what a rule costs."""

    rule: str
    runs: float  # share of the runs in which it asked for at least one test that was made
    mean_tests: float  # tests it asked for, per run
    mean_minutes: float  # their minutes (preparations they paid included), per run


@dataclass(frozen=True)
class SimulationResult:
    """What ``ohmtrail simulate`` reports."""

    ruleset: str
    hypotheses: int
    trials: int
    seed: int
    threshold: float
    accuracy: float
    mean_tests: float
    mean_minutes: float
    worst_minutes: float
    linear_walk: Figures
    half_split: Figures
    linear_walk_finished: Figures  # the walk, then the planner from its readings to the stop
    planner_noise_free_minutes: float
    optimal_noise_free_minutes: float | None
    ambiguity_groups: tuple[tuple[str, ...], ...]
    undecided: float  # prior-weighted share of runs that stopped without a certain diagnosis
    per_hypothesis: tuple[dict[str, Any], ...] = field(default=())
    complaint: str | None = None  # the complaint the vehicles came in with (None: none given)
    rules_at_start: tuple[str, ...] = ()  # the decision rules the start fires (the complaint's, the vehicle's)
    rule_tests: tuple[RuleTests, ...] = ()  # what the tests the rules asked for cost, rule by rule
    floor_minutes: float | None = None  # the least mean any diagnosis right at the threshold can reach

    def where_minutes_go(self, n: int | None = None) -> tuple[tuple[str, float, float, float], ...]:
        """(hypothesis, prior, its mean minutes, its share of the planner's mean minutes), the
        largest share first, ``n`` of them (None: all): the faults worth a cheaper test."""
        rows = sorted(((row["hypothesis"], row["prior"], row["mean_minutes"],
                        row["prior"] * row["mean_minutes"] / self.mean_minutes if self.mean_minutes > 0 else 0.0)
                       for row in self.per_hypothesis), key=lambda row: -row[3])
        return tuple(rows if n is None else rows[:n])

    def to_json(self) -> dict[str, Any]:
        """The JSON shape of the command line (issue 4), with a few more keys."""
        return {
            "ruleset": self.ruleset,
            "hypotheses": self.hypotheses,
            "trials": self.trials,
            "accuracy": self.accuracy,
            "mean_tests": self.mean_tests,
            "mean_minutes": self.mean_minutes,
            "worst_minutes": self.worst_minutes,
            "linear_walk": asdict(self.linear_walk),
            "half_split": asdict(self.half_split),
            "linear_walk_finished": asdict(self.linear_walk_finished),
            "noise_free": {"planner_mean_minutes": self.planner_noise_free_minutes,
                           "optimal_mean_minutes": self.optimal_noise_free_minutes},
            "ambiguity_groups": [list(g) for g in self.ambiguity_groups],
            "seed": self.seed,
            "threshold": self.threshold,
            "undecided": self.undecided,
            "per_hypothesis": list(self.per_hypothesis),
            "complaint": self.complaint,
            "rules_at_start": list(self.rules_at_start),
            "rule_tests": [asdict(r) for r in self.rule_tests],
            "floor_mean_minutes": self.floor_minutes,
        }


def _named(conclusion: Conclusion) -> str:
    """The fault a run named: the diagnosis (the most probable member of a group), else the top."""
    return conclusion.diagnosis if conclusion.diagnosis is not None else conclusion.ranking[0][0]


@dataclass(frozen=True)
class PlannerRun:
    """One diagnosis driven to its stop: where it stopped, the tests and minutes it took, and the
    minutes of the tests a decision rule asked for (required or recommended), by rule."""

    conclusion: Conclusion
    tests: int
    minutes: float
    by_rule: tuple[tuple[str, float], ...] = ()  # (rule id, minutes of one test it asked for), in order


def run_planner(start: Diagnosis, read: Callable[[int], Reading], limit: int = 200) -> PlannerRun:
    """Drive a diagnosis to its stop with a reading source."""
    d = start
    tests, minutes = 0, 0.0
    by_rule: list[tuple[str, float]] = []
    for _ in range(limit):
        step = d.next(explain_choice=False)
        if isinstance(step, Conclusion):
            return PlannerRun(step, tests, minutes, tuple(by_rule))
        t = d.table.test_index(step.test_id)
        d = d.answer(step.test_id, read(t))
        tests += 1
        minutes += step.cost_minutes
        if step.why.rule is not None:
            by_rule.append((step.why.rule, step.cost_minutes))
    raise RuntimeError("the planner did not stop")  # pragma: no cover - every test is taken once


def _right(table: PredictionTable, conclusion: Conclusion, h: int, group_of: dict[int, set[int]]) -> bool:
    """Whether a conclusion names hypothesis ``h``: itself, a member of its ambiguity group, or a
    concluded group that holds it."""
    named = table.hypothesis_index(_named(conclusion))
    return named == h or named in group_of.get(h, ()) or table.hypotheses[h].id in conclusion.group


def finish(start: Diagnosis, table: PredictionTable, walk: WalkResult, draws: dict[int, Reading],
           read: Callable[[int], Reading]) -> PlannerRun:
    """The planner carried on from a walk's readings to its stop: its tests and minutes are those
    after the walk's. Preparations the walk made are not paid again."""
    d = start
    for t in walk.tests:
        d = d.answer(table.tests[t].id, draws[t])
    return run_planner(d, read)


def _walk_named(model: EvidenceModel, log_prior: np.ndarray, walk: WalkResult,
                draws: dict[int, Reading]) -> int:
    p = posterior(log_prior, model, [(t, draws[t]) for t in walk.tests])
    return int(np.argmax(p))


def complaint_context(loaded: LoadedRuleset, complaint: str | None) -> Context:
    """The context a simulation starts from: no complaint, or one of the ruleset's complaints
    (by id). An unknown id is an :class:`~assistant.errors.OhmtrailError` naming the known ones."""
    if complaint is None:
        return Context()
    known = [c.id for c in loaded.ruleset.complaints]
    if complaint not in known:
        raise OhmtrailError(f"{loaded.path}: no complaint '{complaint}' in ruleset '{loaded.ruleset.id}'; "
                            + (f"its complaints: {', '.join(known)}" if known else "it has no complaints"))
    return Context(complaint=complaint)


def simulate(loaded: LoadedRuleset, table: PredictionTable, *, trials: int = 20, seed: int = 0,
             threshold: float | None = None, settings: PlannerSettings | None = None,
             progress: Progress | None = None, optimum_seconds: float = OPTIMUM_SECONDS,
             vehicles: PredictionTable | None = None, complaint: str | None = None) -> SimulationResult:
    """Simulate ``trials`` diagnoses per hypothesis; see the module docstring.

    ``vehicles``: the table the simulated vehicles are drawn from (the same hypotheses and
    tests as ``table``, another Monte Carlo seed: :data:`VEHICLE_SEED_OFFSET`); None draws them
    from ``table`` itself, which flatters the planner a little.

    ``complaint``: the vehicles come in with this complaint (a complaint id of the ruleset). The
    planner starts from it (its suspects, the rules it fires), and the faults are weighted by
    the ruleset's own probabilities given it: the priors, with the faults it does not lead to
    scaled by its ``others``. The walks do not read complaints; they are scored on the same
    vehicles with the same weights.
    """
    if trials < 1:
        raise ValueError("trials must be at least 1")
    context = complaint_context(loaded, complaint)
    source = vehicles_or(table, vehicles)
    model = evidence_model(table)
    hyps = table.hypotheses
    start = Diagnosis.start(loaded, table, context, threshold, widen_to_pairs=False,
                            settings=settings, model=model)
    priors = start.posterior()  # the priors given the complaint and the rules it fires
    log_prior = np.log(np.clip(priors, 1e-300, None))
    groups = ambiguity_groups(model, (settings or PlannerSettings()).ambiguity_tolerance)
    group_of = {h: set(g) for g in groups for h in g}
    path = voltage_path(loaded.ruleset, table)

    acc = np.zeros(len(hyps))
    tests_used = np.zeros(len(hyps))
    minutes_used = np.zeros(len(hyps))
    undecided = np.zeros(len(hyps))
    walk = {name: np.zeros((3, len(hyps))) for name in ("linear_walk", "half_split", "linear_walk_finished")}
    worst = 0.0
    asked: dict[str, np.ndarray] = {}  # rule -> (runs it asked in, tests, minutes) per hypothesis
    live = [h for h in range(len(hyps)) if priors[h] > 0]
    total_runs, done = len(live) * trials, 0
    for h in live:
        for trial in range(trials):
            # one vehicle: one set of part values behind all its readings
            world = int(reading_stream(seed, hyps[h].id, trial).integers(source.samples.shape[2]))
            draws = {t: draw_reading(source, h, t, reading_stream(seed, hyps[h].id, trial, info.id), sample=world)
                     for t, info in enumerate(table.tests)}
            read = walk_readings(draws)
            run = run_planner(start, read)
            acc[h] += _right(table, run.conclusion, h, group_of)
            tests_used[h] += run.tests
            minutes_used[h] += run.minutes
            undecided[h] += run.conclusion.diagnosis is None
            worst = max(worst, run.minutes)
            for rule_id in {r for r, _ in run.by_rule}:
                asked.setdefault(rule_id, np.zeros((3, len(hyps))))[0, h] += 1
            for rule_id, cost in run.by_rule:
                asked[rule_id][1:, h] += (1, cost)
            for name, strategy in (("linear_walk", linear_walk), ("half_split", half_split)):
                result = strategy(table, path, read)
                guess = _walk_named(model, log_prior, result, draws)
                walk[name][0, h] += guess == h or guess in group_of.get(h, ())
                walk[name][1, h] += len(result.tests)
                walk[name][2, h] += result.minutes
                if name == "linear_walk":
                    more = finish(start, table, result, draws, read)
                    walk["linear_walk_finished"][:, h] += (_right(table, more.conclusion, h, group_of),
                                                           len(result.tests) + more.tests,
                                                           result.minutes + more.minutes)
            done += 1
            if progress is not None:
                progress(done, total_runs)

    def weighted(values: np.ndarray) -> float:
        return float(priors @ (values / trials))

    nf_planner, nf_optimum = noise_free(loaded, table, threshold, settings, optimum_seconds, context)
    lowest = model_floors(model, priors, start.threshold, together=groups)
    floor = weighted_floor([None if f is None else f.minutes for f in lowest], priors)
    per = tuple({"hypothesis": hyps[h].id, "prior": float(priors[h]), "accuracy": acc[h] / trials,
                 "mean_tests": tests_used[h] / trials, "mean_minutes": minutes_used[h] / trials}
                for h in live)
    return SimulationResult(
        ruleset=loaded.ruleset.id, hypotheses=len(hyps), trials=trials, seed=seed,
        threshold=start.threshold,
        accuracy=weighted(acc), mean_tests=weighted(tests_used), mean_minutes=weighted(minutes_used),
        worst_minutes=worst,
        linear_walk=Figures(*(weighted(walk["linear_walk"][i]) for i in range(3))),
        half_split=Figures(*(weighted(walk["half_split"][i]) for i in range(3))),
        linear_walk_finished=Figures(*(weighted(walk["linear_walk_finished"][i]) for i in range(3))),
        planner_noise_free_minutes=nf_planner, optimal_noise_free_minutes=nf_optimum,
        ambiguity_groups=tuple(tuple(hyps[h].id for h in g) for g in groups),
        undecided=weighted(undecided), per_hypothesis=per, complaint=complaint,
        rules_at_start=start.rules_fired,
        rule_tests=tuple(RuleTests(rule_id, *(weighted(counts[i]) for i in range(3)))
                         for rule_id, counts in sorted(asked.items())),
        floor_minutes=floor,
    )


def noise_free(loaded: LoadedRuleset, table: PredictionTable, threshold: float | None = None,
               settings: PlannerSettings | None = None,
               optimum_seconds: float = OPTIMUM_SECONDS,
               context: Context | None = None) -> tuple[float, float | None]:
    """(planner's expected minutes, optimal expected minutes) on the noise-free problem, the
    faults weighted by the priors given ``context`` (its complaint)."""
    nf = build_model(table, noise_free=True)
    outcomes = noise_free_outcomes(nf)
    base = settings or PlannerSettings()
    # the same stopping rule as the optimum: stop at the threshold or when no test splits
    exact = PlannerSettings(base.threshold, 1e-9, base.recommend_boost, base.state_change_minutes,
                            base.ambiguity_tolerance)
    start = Diagnosis.start(loaded, table, context or Context(), threshold, widen_to_pairs=False,
                            settings=exact, model=nf)
    priors = start.posterior()
    expected = 0.0
    for h in range(len(table.hypotheses)):
        if priors[h] <= 0:
            continue

        def read(t: int, h: int = h) -> Reading:
            o = nf.tests[t]
            k = int(outcomes[h, t])
            if o.is_observation:
                return Reading(o.label(k), outcome=o.label(k))
            centre = o.centre(k)
            if math.isinf(centre):
                return Reading(o.label(k), overload=True)
            return Reading(o.label(k), value=centre)

        expected += priors[h] * run_planner(start, read).minutes
    costs = [t.cost_minutes for t in table.tests]
    optimum = optimal_cost(outcomes, priors, costs, start.threshold, time_limit=optimum_seconds,
                           prepare=[t.prepare for t in table.tests])
    return expected, optimum
