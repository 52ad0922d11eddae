"""Running a ruleset's cases: the author's readings, given as answers, must lead to the expected fault.

A case (``cases:`` in a ruleset) holds readings by test id, the complaint, vehicle facts and
fault codes, the fault it must end in, and optionally the order the first tests must be
asked in (a prefix) and the most tests it may take. :func:`run_case` drives the diagnosis
engine as a technician would: each proposed test is answered with the case's reading, or
skipped when the case has none, until the engine concludes. A case passes when the
conclusion is the expected fault and the order and test count hold.
"""

from __future__ import annotations

import logging
from collections.abc import Callable, Iterable
from dataclasses import dataclass, field
from pathlib import Path

from assistant.diagnosis import Conclusion, Context, Diagnosis
from assistant.errors import OhmtrailError, Problem, RulesetError
from assistant.overlay import apply_priors
from assistant.predict import PredictionTable
from assistant.reading import parse_reading
from assistant.ruleset.lint import check_ruleset
from assistant.ruleset.load import LoadedRuleset, load_ruleset, ruleset_files
from assistant.ruleset.model import Case

log = logging.getLogger("ohmtrail.cases")

Predictor = Callable[[LoadedRuleset], PredictionTable]


@dataclass(frozen=True)
class CaseResult:
    """What one case did: the conclusion, the tests asked, and each way it differs from the case."""

    ruleset_id: str
    case_id: str
    expected: str
    diagnosis: str | None
    probability: float
    stopped_because: str
    asked: tuple[str, ...]  # tests answered with the case's readings, in order
    skipped: tuple[str, ...]  # tests proposed that the case has no reading for
    minutes: float  # the cost of the tests asked
    differences: tuple[str, ...] = ()

    @property
    def passed(self) -> bool:
        """True when nothing differs from what the case expects."""
        return not self.differences


@dataclass(frozen=True)
class CheckReport:
    """Every case of every ruleset checked, and the rulesets that could not be run."""

    results: tuple[CaseResult, ...] = ()
    problems: tuple[Problem, ...] = ()  # rulesets that did not load, lint or predict
    files: int = 0
    without_cases: tuple[str, ...] = field(default=())

    @property
    def ok(self) -> bool:
        """True when every case passed and every ruleset could be run."""
        return not self.problems and all(r.passed for r in self.results) and self.files > 0


def run_case(loaded: LoadedRuleset, table: PredictionTable, case: Case, index: int = 0) -> CaseResult:
    """Run one case through the diagnosis engine; ``index`` is its place under ``cases:`` (for errors)."""
    rs = loaded.ruleset
    context = Context(complaint=case.complaint, vehicle=dict(case.vehicle), fault_codes=case.fault_codes)
    state = Diagnosis.start(loaded, table, context)
    infos = {t.id: t for t in table.tests}
    asked: list[str] = []
    skipped: list[str] = []
    minutes = 0.0
    differences: list[str] = []
    conclusion: Conclusion | None = None
    # every test is proposed at most once, answered or skipped; the bound only guards the loop
    for _ in range(2 * len(table.tests) + 2):
        step = state.next()
        if isinstance(step, Conclusion):
            conclusion = step
            break
        test_id = step.test_id
        if test_id in case.readings:
            text = str(case.readings[test_id])
            try:
                reading = parse_reading(text, infos[test_id])
            except OhmtrailError as exc:
                # the author's mistake in this case: say where, and let the other cases run
                problem = loaded.locator.problem(f"reading '{text}' for {test_id}: {exc}",
                                                 ("cases", index, "readings", test_id), text)
                return CaseResult(rs.id, case.id, case.expect, None, 0.0, "bad reading", tuple(asked),
                                  tuple(skipped), minutes, (str(problem),))
            state = state.answer(test_id, reading)
            asked.append(test_id)
            minutes += step.cost_minutes  # its preparations included
        else:
            state = state.skip(test_id)
            skipped.append(test_id)
    if conclusion is None:
        ranking = state.ranking()
        differences.append("the diagnosis did not conclude")
        top, p = ranking[0] if ranking else (None, 0.0)
        return CaseResult(rs.id, case.id, case.expect, top, p, "did not conclude", tuple(asked), tuple(skipped),
                          minutes, tuple(differences))
    if conclusion.diagnosis != case.expect:
        got = conclusion.diagnosis or "nothing certain"
        leaders = ", ".join(f"{h} {p:.2f}" for h, p in conclusion.ranking[:3])
        differences.append(f"expected {case.expect}, got {got} ({conclusion.stopped_because}; leading: {leaders})")
    if case.order is not None and tuple(asked[: len(case.order)]) != tuple(case.order):
        differences.append(f"expected the tests to start {', '.join(case.order)}; asked "
                           f"{', '.join(asked[: max(len(case.order), 1)]) or 'none'}")
    if case.max_tests is not None and len(asked) > case.max_tests:
        differences.append(f"expected at most {case.max_tests} tests; took {len(asked)} ({', '.join(asked)})")
    unused = [t for t in case.readings if t not in asked]
    if unused:
        log.info("%s/%s: readings not asked for: %s", rs.id, case.id, ", ".join(unused))
    return CaseResult(rs.id, case.id, case.expect, conclusion.diagnosis, conclusion.probability,
                      conclusion.stopped_because, tuple(asked), tuple(skipped), minutes, tuple(differences))


def run_cases(loaded: LoadedRuleset, table: PredictionTable) -> tuple[CaseResult, ...]:
    """Every case of a ruleset, in file order."""
    table = apply_priors(table, loaded.ruleset)
    return tuple(run_case(loaded, table, case, i) for i, case in enumerate(loaded.ruleset.cases))


def default_predictor(samples: int = 64, seed: int = 0) -> Predictor:
    """Predictions from the circuit engine (cached on disk by content)."""
    from assistant.predict import predict

    def run(loaded: LoadedRuleset) -> PredictionTable:
        return predict(loaded, samples=samples, seed=seed)

    return run


def check_paths(paths: Iterable[str | Path], predictor: Predictor | None = None, *,
                beside: bool = True) -> CheckReport:
    """Load, lint and run the cases of every ruleset under ``paths``; collect every result and problem."""
    predictor = predictor or default_predictor()
    results: list[CaseResult] = []
    problems: list[Problem] = []
    without: list[str] = []
    files = 0
    for path in ruleset_files(paths):
        files += 1
        try:
            loaded = check_ruleset(load_ruleset(path, beside=beside))
            if not loaded.ruleset.cases:
                without.append(str(path))
                continue
            results.extend(run_cases(loaded, predictor(loaded)))
        except RulesetError as exc:
            problems.extend(exc.problems)
        except OhmtrailError as exc:
            problems.append(Problem(str(exc), str(path)))
    return CheckReport(tuple(results), tuple(problems), files, tuple(without))
