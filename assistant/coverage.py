"""How well a ruleset's tests cover its faults: what they can tell apart, and at what cost.

For an author deciding which tests to add or drop:

- **ambiguity groups**: hypotheses no test can tell apart. A test tells two hypotheses apart
  when the distributions of what it shows under them (the diagnosis engine's outcome models:
  display bins with meter noise, OL, observation outcomes) differ by at least ``separation``
  in total variation (default: the engine's own ambiguity tolerance). Hypotheses that no test
  tells apart are joined transitively, as the engine groups them when it concludes.
- **expected minutes to isolate** each fault: the mean cost of the tests the diagnosis engine
  asks before it concludes, over ``runs`` simulated diagnoses with readings drawn under that
  fault (``assistant.simulate.draw_reading``: one simulated vehicle per run, every reading from
  its one Monte Carlo sample, from the ``vehicles`` table where one is given), each started from
  the first complaint that leads to the fault (none for "none" or a fault no complaint leads
  to), and how often it concluded that very fault;
- **tests that never change any decision**: tests that tell no two hypotheses apart, and tests
  the engine never chose in any of the simulated diagnoses (candidates to drop);
- **the floor** of each fault: the least minutes of tests and preparations any diagnosis must
  spend to name it at the threshold, whatever order it takes them in (``assistant.floor``), and
  the cheapest tests that reach it: where the floor stands high, no planner can do better;
- **faults no complaint leads to**, and **the operating states the tests need**.

:func:`coverage` returns a :class:`Coverage`; :meth:`Coverage.to_json` gives the documented
JSON shape (docs/authoring.md).
"""

from __future__ import annotations

import logging
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np

from assistant.diagnosis import Conclusion, Context, Diagnosis, evidence_model
from assistant.floor import Floor, model_floors, weighted_floor
from assistant.planner import AMBIGUITY_TOLERANCE, separation
from assistant.planner import ambiguity_groups as engine_groups
from assistant.overlay import apply_priors
from assistant.predict import PredictionTable
from assistant.ruleset.load import LoadedRuleset
from assistant.ruleset.model import ObservationTest, Ruleset
from assistant.simulate import draw_reading, reading_stream, vehicles_or

log = logging.getLogger("ohmtrail.coverage")

JSON_VERSION = 1
DEFAULT_SEPARATION = AMBIGUITY_TOLERANCE


@dataclass(frozen=True)
class FaultCoverage:
    """One hypothesis: whether it can be isolated, and what isolating it costs."""

    id: str
    prior: float
    group: int | None  # index into Coverage.groups, None when some test tells it from every other
    confused_with: tuple[str, ...]  # hypotheses no single test tells it from
    expected_minutes: float | None  # None when not simulated
    concluded_right: float | None  # fraction of simulated diagnoses that ended in this hypothesis
    complaints: tuple[str, ...]  # complaints that lead to it
    floor_minutes: float | None = None  # least minutes to name it at the threshold (None: no prior)
    floor_tests: tuple[str, ...] = ()  # a cheapest set of tests that can
    floor_preparations: tuple[str, ...] = ()  # the preparations those tests need
    floor_only: tuple[tuple[str, ...], ...] = ()  # per floor test, the faults only it tells this one from


@dataclass(frozen=True)
class Coverage:
    """The coverage report of one ruleset."""

    ruleset_id: str
    version: str
    sha256: str
    overlays: tuple[str, ...]
    runs: int
    seed: int
    separation: float
    faults: tuple[FaultCoverage, ...]
    groups: tuple[tuple[str, ...], ...]
    separates_nothing: tuple[str, ...]
    never_chosen: tuple[str, ...]
    without_complaint: tuple[str, ...]
    states: tuple[tuple[str, str, tuple[str, ...]], ...]  # (state id, label, tests that need it)
    tests_without_state: tuple[str, ...]
    looks_with_rows: tuple[str, ...] = ()  # observations answered by hand-written rows, not by seen

    @property
    def weighted_minutes(self) -> float | None:
        """Expected minutes to isolate, weighted by the hypotheses' priors (None if not simulated)."""
        known = [(f.prior, f.expected_minutes) for f in self.faults if f.expected_minutes is not None]
        if not known:
            return None
        total = sum(p for p, _ in known)
        return sum(p * m for p, m in known) / total if total > 0 else None

    @property
    def weighted_floor(self) -> float | None:
        """The floors weighted by the hypotheses' priors (``assistant.floor.weighted_floor``)."""
        return weighted_floor([f.floor_minutes for f in self.faults], [f.prior for f in self.faults])

    def to_json(self) -> dict[str, Any]:
        """The documented JSON shape (see docs/authoring.md, "coverage --json")."""
        return {
            "coverage": JSON_VERSION,
            "ruleset": {"id": self.ruleset_id, "version": self.version, "sha256": self.sha256,
                        "overlays": list(self.overlays)},
            "settings": {"runs": self.runs, "seed": self.seed, "separation": self.separation},
            "faults": [
                {"id": f.id, "prior": f.prior, "isolable": f.group is None, "group": f.group,
                 "confused_with": list(f.confused_with), "expected_minutes": f.expected_minutes,
                 "concluded_right": f.concluded_right, "complaints": list(f.complaints),
                 "floor_minutes": f.floor_minutes, "floor_tests": list(f.floor_tests),
                 "floor_preparations": list(f.floor_preparations),
                 "floor_only": {t: list(o) for t, o in zip(f.floor_tests, f.floor_only, strict=True)}}
                for f in self.faults
            ],
            "ambiguity_groups": [list(g) for g in self.groups],
            "weighted_expected_minutes": self.weighted_minutes,
            "weighted_floor_minutes": self.weighted_floor,
            "tests_never_deciding": (
                [{"id": t, "reason": "separates no two hypotheses"} for t in self.separates_nothing]
                + [{"id": t, "reason": f"never chosen in {self.runs * len(self.faults)} simulated diagnoses"}
                   for t in self.never_chosen]
            ),
            "faults_without_complaint": list(self.without_complaint),
            "states": [{"id": s, "label": label, "tests": list(tests)} for s, label, tests in self.states],
            "tests_without_state": list(self.tests_without_state),
            "looks_with_rows": list(self.looks_with_rows),
        }


# --------------------------------------------------------------------------- separability


def separation_matrix(table: PredictionTable) -> np.ndarray:
    """``sep[t, a, b]``: total-variation distance between what test ``t`` shows under ``a`` and ``b``.

    The distributions are the diagnosis engine's own outcome models (display bins with meter
    noise, OL, observation outcomes), so coverage and the engine agree on what a test can tell.
    """
    return separation(evidence_model(table))


def ambiguity_groups(table: PredictionTable, separation: float = DEFAULT_SEPARATION, *,
                     sep: np.ndarray | None = None
                     ) -> tuple[tuple[tuple[str, ...], ...], dict[str, tuple[str, ...]], tuple[str, ...]]:
    """The groups no test tells apart, each hypothesis's direct partners, and the tests that
    separate nothing; ``sep``: the table's :func:`separation_matrix` where already computed."""
    ids = [h.id for h in table.hypotheses]
    if sep is None:
        sep = separation_matrix(table)
    told = np.asarray((sep >= separation).any(axis=0) if sep.size else np.zeros((len(ids), len(ids)), dtype=bool))
    partners = {ids[a]: tuple(ids[b] for b in range(len(ids)) if b != a and not told[a, b])
                for a in range(len(ids))}
    groups = tuple(tuple(ids[h] for h in g) for g in engine_groups(evidence_model(table), separation))
    useless = tuple(table.tests[t].id for t in range(len(table.tests)) if not (sep[t] >= separation).any())
    return groups, partners, useless


def fault_floors(table: PredictionTable, threshold: float, groups: tuple[tuple[str, ...], ...] = (), *,
                 sep: np.ndarray | None = None) -> tuple[Floor | None, ...]:
    """Each hypothesis's floor (``assistant.floor``) from the engine's outcome models and the
    table's priors; the members of one of ``groups`` may be named together."""
    index = {h.id: i for i, h in enumerate(table.hypotheses)}
    priors = np.array([h.prior for h in table.hypotheses], dtype=float)
    if priors.sum() > 0:
        priors = priors / priors.sum()
    return model_floors(evidence_model(table), priors, threshold,
                        together=[[index[h] for h in g] for g in groups], sep=sep)


# --------------------------------------------------------------------------- simulation


DrawReading = Callable[..., Any]


def isolation_minutes(loaded: LoadedRuleset, table: PredictionTable, hypothesis: int, runs: int,
                      seed: int = 0, draw: DrawReading | None = None,
                      context: Context | None = None, *,
                      vehicles: PredictionTable | None = None) -> tuple[float, float, set[str]]:
    """Mean minutes to conclude under one hypothesis, the fraction concluded right, and the tests asked.

    Each run is one simulated vehicle: one Monte Carlo sample of ``vehicles`` (a second run of
    the circuit, :func:`assistant.simulate.vehicle_table`; None: ``table`` itself) behind all its
    readings, ``draw(vehicles, hypothesis, test, rng, sample=...)``, with the random streams
    ``ohmtrail simulate`` uses (:func:`assistant.simulate.reading_stream`): run ``r`` of a fault
    is the vehicle of simulate's trial ``r`` for the same seed.
    """
    if draw is None:
        draw = draw_reading
    source = vehicles_or(table, vehicles)
    index = {t.id: i for i, t in enumerate(table.tests)}
    target = table.hypotheses[hypothesis].id
    minutes: list[float] = []
    right = 0
    asked: set[str] = set()
    for run in range(runs):
        world = int(reading_stream(seed, target, run).integers(source.samples.shape[2]))
        state = Diagnosis.start(loaded, table, context or Context())
        spent = 0.0
        for _step in range(2 * len(table.tests) + 2):
            step = state.next()
            if isinstance(step, Conclusion):
                right += step.diagnosis == target
                break
            stream = reading_stream(seed, target, run, step.test_id)
            state = state.answer(step.test_id, draw(source, hypothesis, index[step.test_id], stream, sample=world))
            spent += step.cost_minutes  # its preparations included
            asked.add(step.test_id)
        minutes.append(spent)
    return float(np.mean(minutes)), right / runs, asked


# --------------------------------------------------------------------------- the report


def _complaints_leading_to(ruleset: Ruleset, fault_id: str) -> tuple[str, ...]:
    component = fault_id.split(".", 1)[0]
    return tuple(c.id for c in ruleset.complaints
                 if not c.suspects or fault_id in c.suspects or component in c.suspects)


def coverage(loaded: LoadedRuleset, table: PredictionTable, *, runs: int = 4, seed: int = 0,
             separation: float = DEFAULT_SEPARATION, draw: DrawReading | None = None,
             vehicles: PredictionTable | None = None) -> Coverage:
    """The coverage report of a ruleset from its prediction table (``runs`` 0: no simulation).

    ``vehicles``: the table the simulated vehicles are drawn from (the command passes
    :func:`assistant.simulate.vehicle_table`); None draws them from ``table``.
    """
    rs = loaded.ruleset
    table = apply_priors(table, rs)
    sep = separation_matrix(table)  # what each test tells apart, for the groups and the floors
    groups, partners, useless = ambiguity_groups(table, separation, sep=sep)
    group_of = {hid: i for i, g in enumerate(groups) for hid in g}
    lowest = fault_floors(table, rs.threshold, groups, sep=sep)
    chosen: set[str] = set()
    faults: list[FaultCoverage] = []
    for h, hyp in enumerate(table.hypotheses):
        minutes: float | None = None
        right: float | None = None
        complaints = () if hyp.id == "none" else _complaints_leading_to(rs, hyp.id)
        if runs > 0 and hyp.prior > 0:
            # the technician starts from a complaint: the first that leads to this fault
            context = Context(complaint=complaints[0]) if complaints else Context()
            minutes, right, asked = isolation_minutes(loaded, table, h, runs, seed, draw, context,
                                                      vehicles=vehicles)
            chosen |= asked
        floor = lowest[h]
        faults.append(FaultCoverage(hyp.id, hyp.prior, group_of.get(hyp.id), partners.get(hyp.id, ()),
                                    minutes, right, complaints,
                                    None if floor is None else floor.minutes,
                                    () if floor is None else tuple(table.tests[t].id for t in floor.tests),
                                    () if floor is None else floor.preparations,
                                    () if floor is None else tuple(tuple(table.hypotheses[o].id for o in only)
                                                                   for only in floor.only)))
    never = tuple(t.id for t in table.tests if runs > 0 and t.id not in chosen and t.id not in useless)
    without = tuple(f.id for f in faults if f.id != "none" and "+" not in f.id and not f.complaints)
    states = tuple((name, st.label, tuple(t.id for t in rs.tests if t.state == name)) for name, st in rs.states.items())
    log.info("%s: %d groups, %d tests separate nothing, %d never chosen", rs.id, len(groups), len(useless), len(never))
    by_hand = tuple(t.id for t in rs.tests if isinstance(t, ObservationTest) and t.seen is None)
    return Coverage(rs.id, rs.version, loaded.sha256, loaded.overlays, runs, seed, separation, tuple(faults),
                    groups, useless, never, without, states, tuple(t.id for t in rs.tests if t.state is None),
                    by_hand)


def _floor_tests_text(fault: FaultCoverage) -> str:
    """A fault's floor tests, each with the faults only it tells this one from, and their preparations."""
    parts = []
    for test, only in zip(fault.floor_tests, fault.floor_only, strict=True):
        twins = ", ".join(only[:3]) + (" ..." if len(only) > 3 else "")
        parts.append(f"{test} (the only test telling it from {twins})" if only else test)
    text = ", ".join(parts)
    return text + (f"; with {', '.join(fault.floor_preparations)}" if fault.floor_preparations else "")


def coverage_text(report: Coverage) -> str:
    """The human view of a coverage report: a table per hypothesis, then the lists."""
    lines = [f"{report.ruleset_id} {report.version}: {len(report.faults)} hypotheses"
             + (f", {report.runs} simulated diagnoses each" if report.runs else ", no simulation")]
    lines.extend(f"overlay: {o}" for o in report.overlays)
    width = max([len("hypothesis")] + [len(f.id) for f in report.faults])
    lines.append(f"{'hypothesis':<{width}}  {'prior':>6}  {'group':>5}  {'E[min]':>6}  {'floor':>5}  {'right':>5}  "
                 "complaints")
    for f in report.faults:
        group = "-" if f.group is None else str(f.group + 1)
        minutes = "-" if f.expected_minutes is None else f"{f.expected_minutes:.1f}"
        right = "-" if f.concluded_right is None else f"{f.concluded_right:.0%}"
        floor = "-" if f.floor_minutes is None else f"{f.floor_minutes:.1f}"
        complaints = ", ".join(f.complaints) if f.complaints else ("-" if f.id == "none" else "NONE")
        lines.append(f"{f.id:<{width}}  {f.prior:>6.1%}  {group:>5}  {minutes:>6}  {floor:>5}  {right:>5}  "
                     f"{complaints}")
    if report.weighted_minutes is not None:
        lines.append(f"expected minutes to isolate, weighted by prior: {report.weighted_minutes:.1f}")
    if report.weighted_floor is not None:
        lines.append(f"floor (the least any diagnosis right at the threshold can spend), weighted by prior: "
                     f"{report.weighted_floor:.1f}")
        costly = sorted((f for f in report.faults if f.floor_minutes),
                        key=lambda f: -f.prior * (f.floor_minutes or 0))
        if costly:
            lines.append("the highest floors, weighted by prior (a cheapest set of tests that can name the fault):")
            lines.extend(f"  {f.id}: {f.floor_minutes:.1f} min: {_floor_tests_text(f)}" for f in costly[:5])
    lines.append("")
    if report.groups:
        lines.append("ambiguity groups (no test tells these apart):")
        lines.extend(f"  {i + 1}: {', '.join(g)}" for i, g in enumerate(report.groups))
    else:
        lines.append("ambiguity groups: none; every hypothesis can be told from every other")
    never = [(t, "separates no two hypotheses") for t in report.separates_nothing]
    never += [(t, f"never chosen in {report.runs * len(report.faults)} simulated diagnoses")
              for t in report.never_chosen]
    lines.append("tests that never change any decision:" if never else
                 "tests that never change any decision: none")
    lines.extend(f"  {t}: {why}" for t, why in never)
    lines.append("faults no complaint leads to: " + (", ".join(report.without_complaint) or "none"))
    lines.append("states the tests need:")
    for state, label, tests in report.states:
        lines.append(f"  {state} ({label}): {', '.join(tests) if tests else 'no test'}")
    if report.tests_without_state:
        lines.append(f"  no state: {', '.join(report.tests_without_state)}")
    if report.looks_with_rows:
        lines.append("looks answered by hand-written rows (check each fault's likeliest answer against "
                     "`ohmtrail predict`, or write the look with seen): " + ", ".join(report.looks_with_rows))
    return "\n".join(lines)
