"""The diagnosis engine's facade: immutable diagnosis states the session drives.

A :class:`Diagnosis` is one moment of a diagnosis: the readings so far, the tests skipped, the
rules that fired, and the posterior over the hypotheses. Every command returns a new state and
leaves the old one as it was, so a failed command loses nothing and ``undo`` is the state
before. Nothing here does I/O; the session owns the prompt, the store and the clock.

    state = Diagnosis.start(loaded, table, Context(complaint="left_out"))
    step = state.next()                 # a Proposal (test, gain, cost, why) or a Conclusion
    state = state.answer(step.test_id, reading)

When no hypothesis explains the readings, ``conflict`` names the reading that conflicts most
(re-measure it) and, where a ``widen`` function is given (or ``assistant.predict.predict`` is
available), the hypotheses are widened to pairs of the leading faults.
"""

from __future__ import annotations

import itertools
import logging
import math
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any
from weakref import WeakKeyDictionary

import numpy as np

from assistant.beliefs import EvidenceModel, build_model, normalise_log
from assistant.errors import Problem, RulesEngineError, SessionError
from assistant.planner import (
    Choice,
    PlannerSettings,
    RepairStep,
    Why,
    choose_test,
    expected_gain,
    explain,
    repair_order,
    stop_check,
    verification_test,
)
from assistant.predict import PredictionTable
from assistant.preparation import made_by, pending, test_minutes
from assistant.reading import Reading
from assistant.ruleset.load import LoadedRuleset
from assistant.ruleset.model import Rule
from assistant.rules import RuleEngine, context_facts, reading_fact, rule_engine

log = logging.getLogger("ohmtrail.diagnosis")

Widener = Callable[[Sequence[tuple[str, str]]], PredictionTable]

__all__ = [
    "Conclusion",
    "Conflict",
    "Context",
    "Diagnosis",
    "Proposal",
    "RepairStep",
    "Why",
    "Widener",
]


@dataclass(frozen=True)
class Context:
    """What is known before the first reading."""

    complaint: str | None = None  # a complaint id of the ruleset (or its text)
    vehicle: Mapping[str, Any] = field(default_factory=dict)  # vin, odometer_km, model_year, ...
    fault_codes: tuple[str, ...] = ()


@dataclass(frozen=True)
class Proposal:
    """The next test to make, and why."""

    test_id: str
    gain_bits: float
    cost_minutes: float
    why: Why
    remeasure: bool = False
    prepare: tuple[tuple[str, float], ...] = ()  # preparations to make first, with their minutes (in the cost)


@dataclass(frozen=True)
class Conclusion:
    """Where the planner stopped and what to repair."""

    diagnosis: str | None  # fault id (or "none"); None if nothing is certain enough
    probability: float
    stopped_because: str
    ranking: tuple[tuple[str, float], ...]
    repairs: tuple[RepairStep, ...]
    verification_test: str | None
    group: tuple[str, ...] = ()  # faults no test can tell from the diagnosis (itself first)
    group_probability: float = 0.0


@dataclass(frozen=True)
class Conflict:
    """No hypothesis explains every reading."""

    test_id: str  # the reading that conflicts most: re-measure it
    reading: Reading
    message: str
    explained_without: str  # the hypothesis that best explains the other readings
    widened: bool = False  # pairs of faults were added to the hypotheses


@dataclass(frozen=True, eq=False)
class _Core:
    """What all states of one diagnosis share."""

    loaded: LoadedRuleset
    table: PredictionTable
    model: EvidenceModel
    engine: RuleEngine | None
    settings: PlannerSettings
    context: Context
    base_log_prior: np.ndarray
    widen: Widener | None
    widened: bool
    warnings: tuple[str, ...]


_MODELS: WeakKeyDictionary[PredictionTable, EvidenceModel] = WeakKeyDictionary()


def evidence_model(table: PredictionTable) -> EvidenceModel:
    """The evidence model of a table, built once per table object."""
    model = _MODELS.get(table)
    if model is None:
        model = build_model(table)
        _MODELS[table] = model
    return model


def _default_widener(loaded: LoadedRuleset, table: PredictionTable) -> Widener | None:
    try:
        from assistant import predict as predict_module
    except ImportError:  # pragma: no cover
        return None
    predict_fn = getattr(predict_module, "predict", None)
    if predict_fn is None:
        return None
    samples = int(table.samples.shape[2]) if table.samples.ndim == 3 else 64

    def widen(pairs: Sequence[tuple[str, str]]) -> PredictionTable:
        return predict_fn(loaded, samples=samples, pairs=tuple(pairs))  # type: ignore[no-any-return]

    return widen


def _matches(hyp_faults: Sequence[str], ref: str) -> bool:
    return any(f == ref or f.split(".", 1)[0] == ref for f in hyp_faults)


def _complaint_log_prior(loaded: LoadedRuleset, table: PredictionTable, context: Context,
                         warnings: list[str]) -> np.ndarray:
    priors = np.array([h.prior for h in table.hypotheses], dtype=float)
    with np.errstate(divide="ignore"):
        logp: np.ndarray = np.log(np.clip(priors, 0.0, None))
    if not context.complaint:
        return logp
    found = None
    for comp in loaded.ruleset.complaints:
        if comp.id == context.complaint or comp.text.strip().lower() == context.complaint.strip().lower():
            found = comp
            break
    if found is None:
        warnings.append(f"complaint '{context.complaint}' is not one of this ruleset's complaints; "
                        "the priors are left as they are")
        return logp
    if found.suspects:
        for i, h in enumerate(table.hypotheses):
            if not any(_matches(h.faults, ref) for ref in found.suspects):
                logp[i] += math.log(found.others) if found.others > 0 else -math.inf
    return logp


class Diagnosis:
    """One immutable moment of a diagnosis. Start with :meth:`start`."""

    def __init__(self, core: _Core, answered: tuple[tuple[str, Reading], ...],
                 skipped: tuple[str, ...], previous: Diagnosis | None) -> None:
        self._core = core
        self.answered: tuple[tuple[str, Reading], ...] = answered
        self.skipped: tuple[str, ...] = skipped
        self._previous = previous
        self.conflict: Conflict | None = None
        fired = self._fire_rules()
        self.rules_fired: tuple[str, ...] = fired
        self._apply_rules(fired)
        self._posterior = self._compute_posterior()
        self._check_conflict()

    # ----------------------------------------------------------------- construction

    @classmethod
    def start(cls, loaded: LoadedRuleset, table: PredictionTable, context: Context,
              threshold: float | None = None, *, widen: Widener | None = None,
              widen_to_pairs: bool = True, settings: PlannerSettings | None = None,
              model: EvidenceModel | None = None) -> Diagnosis:
        """The first state of a diagnosis: priors from the table, complaint and rules.

        ``widen`` predicts pairs of faults when the readings fit nothing (default: the circuit
        engine's ``predict`` with the table's sample count); ``widen_to_pairs=False`` turns
        widening off. ``settings`` tunes the planner; ``model`` supplies a prebuilt evidence model.
        """
        base = settings or PlannerSettings()
        thr = threshold if threshold is not None else loaded.ruleset.threshold
        if not 0.5 < thr <= 1.0:
            raise SessionError(f"threshold {thr} must be above 0.5 and at most 1")
        planner = PlannerSettings(thr, base.min_gain_bits, base.recommend_boost,
                                  base.state_change_minutes, base.ambiguity_tolerance)
        warnings: list[str] = []
        engine = rule_engine(loaded) if loaded.ruleset.rules else None
        if engine is not None:
            warnings.extend(str(p) for p in engine.problems)
        core = _Core(
            loaded=loaded, table=table, model=model or evidence_model(table), engine=engine,
            settings=planner, context=context,
            base_log_prior=_complaint_log_prior(loaded, table, context, warnings),
            widen=None if not widen_to_pairs else widen if widen is not None else _default_widener(loaded, table),
            widened=False, warnings=tuple(warnings),
        )
        for w in warnings:
            log.warning("%s", w)
        return cls(core, (), (), None)

    # ----------------------------------------------------------------- rules

    def _facts(self) -> list[tuple[str, Any]]:
        ctx = self._core.context
        facts = context_facts(ctx.complaint, ctx.fault_codes, ctx.vehicle)
        for test_id, r in self.answered:
            facts.append((f"reading.{test_id}", reading_fact(r.value, r.overload, r.outcome)))
        return facts

    def _fire_rules(self) -> tuple[str, ...]:
        engine = self._core.engine
        if engine is None:
            return ()
        return engine.evaluate(self._facts()).fired

    def _rule(self, rule_id: str) -> Rule:
        assert self._core.engine is not None
        return self._core.engine.rules[rule_id]

    def _apply_rules(self, fired: Sequence[str]) -> None:
        core = self._core
        logp = core.base_log_prior.copy()
        required: list[tuple[str, str]] = []
        recommended: list[tuple[str, str]] = []
        cautions: list[str] = []
        for rule_id in fired:
            for action in self._rule(rule_id).then:
                if action.scale is not None:
                    ref, factor = action.scale
                    for i, h in enumerate(core.table.hypotheses):
                        if _matches(h.faults, ref):
                            logp[i] += math.log(factor) if factor > 0 else -math.inf
                elif action.rule_out is not None:
                    for i, h in enumerate(core.table.hypotheses):
                        if _matches(h.faults, action.rule_out):
                            logp[i] = -math.inf
                elif action.require_first is not None:
                    required.append((action.require_first, rule_id))
                elif action.recommend is not None:
                    recommended.append((action.recommend, rule_id))
                elif action.caution is not None:
                    cautions.append(action.caution)
        if not np.isfinite(logp).any():
            if not np.isfinite(core.base_log_prior).any() and not core.context.complaint:
                raise RulesEngineError(f"{core.loaded.path}: every hypothesis has a prior of 0")
            if not np.isfinite(core.base_log_prior).any():
                # Found by tests/test_numbers.py: this used to blame "the rules" when none had fired.
                raise RulesEngineError(
                    f"{core.loaded.path}: complaint '{core.context.complaint}' leaves no hypothesis: its suspects "
                    "have no weight and its 'others' factor of 0 rules out the rest")
            raise RulesEngineError(f"{core.loaded.path}: the rules {', '.join(fired)} rule out every hypothesis")
        self._log_prior = logp
        self._required = tuple(dict.fromkeys(required))
        self._recommended = tuple(dict.fromkeys(recommended))
        self.cautions: tuple[str, ...] = tuple(dict.fromkeys(cautions))

    # ----------------------------------------------------------------- beliefs

    def _indexed(self) -> list[tuple[int, Reading]]:
        table = self._core.table
        return [(table.test_index(t), r) for t, r in self.answered]

    def _compute_posterior(self) -> np.ndarray:
        return normalise_log(self._log_prior + self._core.model.log_likelihood(self._indexed()))

    def _check_conflict(self) -> None:
        if not self.answered:
            return
        core = self._core
        model = core.model
        indexed = self._indexed()
        possible = np.isfinite(self._log_prior)
        explained = possible.copy()
        for t, r in indexed:
            explained &= model.tests[t].explained(r)
        if explained.any():
            return
        # the reading whose removal lets the readings left be explained best
        with np.errstate(divide="ignore"):
            logs = [np.log(model.tests[t].likelihood(r)) for t, r in indexed]
        best_i, best_score, best_h = 0, -math.inf, 0
        for i in range(len(logs)):
            without = self._log_prior + sum((row for j, row in enumerate(logs) if j != i),
                                            np.zeros_like(self._log_prior))
            h = int(np.argmax(without))
            if without[h] > best_score:
                best_i, best_score, best_h = i, float(without[h]), h
        test_id, reading = self.answered[best_i]
        hyp = core.table.hypotheses[best_h].id
        message = (f"no fault explains every reading; '{reading.text}' on {test_id} conflicts most "
                   f"(without it {hyp} fits): re-measure {test_id}")
        widened = False
        if core.widen is not None and not core.widened:
            widened = self._widen()
            if widened:
                message += "; pairs of faults were added to the suspects"
        self.conflict = Conflict(test_id, reading, message, hyp, widened)
        log.info("%s", message)

    def _widen(self, leaders: int = 6) -> bool:
        core = self._core
        table = core.table
        singles = [int(h) for h in np.argsort(-self._posterior, kind="stable")
                   if len(table.hypotheses[h].faults) == 1][:leaders]
        pairs = [(table.hypotheses[a].id, table.hypotheses[b].id) for a, b in itertools.combinations(singles, 2)]
        if not pairs:
            return False
        try:
            wide = core.widen(pairs)  # type: ignore[misc]
        except Exception as exc:  # the circuit engine may refuse a pair; go on with singles
            log.warning("could not predict pairs of faults: %s", exc)
            return False
        warnings: list[str] = []
        self._core = _Core(core.loaded, wide, evidence_model(wide), core.engine, core.settings, core.context,
                           _complaint_log_prior(core.loaded, wide, core.context, warnings),
                           core.widen, True, core.warnings)
        self._apply_rules(self.rules_fired)
        self._posterior = self._compute_posterior()
        return True

    # ----------------------------------------------------------------- queries

    @property
    def table(self) -> PredictionTable:
        """The prediction table in use (with pairs after widening)."""
        return self._core.table

    @property
    def model(self) -> EvidenceModel:
        """The evidence model in use."""
        return self._core.model

    @property
    def threshold(self) -> float:
        return self._core.settings.threshold

    @property
    def warnings(self) -> tuple[str, ...]:
        """Problems that left something out (an unknown complaint, a rule naming an unknown field)."""
        return self._core.warnings

    @property
    def rule_problems(self) -> tuple[Problem, ...]:
        return self._core.engine.problems if self._core.engine else ()

    def posterior(self) -> np.ndarray:
        """P(hypothesis | readings), in table order (a copy)."""
        return self._posterior.copy()

    def ranking(self) -> tuple[tuple[str, float], ...]:
        """Every hypothesis not ruled out, most probable first."""
        p = self._posterior
        order = np.argsort(-p, kind="stable")
        hyps = self._core.table.hypotheses
        return tuple((hyps[h].id, float(p[h])) for h in order if np.isfinite(self._log_prior[h]))

    # ----------------------------------------------------------------- commands

    def _test_index(self, test_id: str) -> int:
        try:
            return self._core.table.test_index(test_id)
        except KeyError as exc:
            raise SessionError(f"unknown test '{test_id}'") from exc

    def answer(self, test_id: str, reading: Reading) -> Diagnosis:
        """The state after a reading (it replaces an earlier reading of the same test)."""
        t = self._test_index(test_id)
        self._core.model.tests[t].outcome_index(reading)  # ReadingError if it does not fit
        answered = tuple(a for a in self.answered if a[0] != test_id) + ((test_id, reading),)
        skipped = tuple(s for s in self.skipped if s != test_id)
        return Diagnosis(self._core, answered, skipped, self)

    def skip(self, test_id: str) -> Diagnosis:
        """The state after a test could not be made now: the planner leaves it out."""
        self._test_index(test_id)
        if test_id in self.skipped:
            return self
        return Diagnosis(self._core, self.answered, self.skipped + (test_id,), self)

    def undo(self) -> Diagnosis:
        """The state before the last answer or skip."""
        if self._previous is None:
            raise SessionError("nothing to undo")
        return self._previous

    def _candidates(self) -> list[int]:
        done = {t for t, _ in self.answered} | set(self.skipped)
        return [i for i, t in enumerate(self._core.table.tests) if t.id not in done]

    def _current_state(self) -> str | None:
        for test_id, _ in reversed(self.answered):
            state = self._core.table.tests[self._core.table.test_index(test_id)].state
            if state is not None:
                return state
        return None

    def next(self, *, explain_choice: bool = True) -> Proposal | Conclusion:
        """The next test to make, or the conclusion when the planner stops.

        ``explain_choice=False`` leaves the proposal's ``why`` without suspects and outcomes
        (for simulations, where nobody reads it)."""
        core = self._core
        p = self._posterior
        candidates = self._candidates()
        tests = core.table.tests
        for test_id, rule_id in self._required:
            t = core.table.test_index(test_id) if any(x.id == test_id for x in tests) else -1
            if t in candidates:
                return self._proposal(t, rule_id)
        recommended = [core.table.test_index(t) for t, _ in self._recommended
                       if any(x.id == t for x in tests)]
        made = self.preparations_made()
        choice = choose_test(p, core.model, candidates, core.settings,
                             current_state=self._current_state(), recommended=recommended, made=made)
        skipped = [core.table.test_index(t) for t in self.skipped]
        stop = stop_check(p, core.model, candidates, core.settings,
                          choice.gain_bits if choice else None, skipped=skipped)
        if stop is not None or choice is None:
            return self._conclusion(stop.reason if stop else "no tests left",
                                    stop.certain if stop else False, stop.group if stop else ())
        rule = next((r for t, r in self._recommended if t == tests[choice.test_index].id), None)
        why = (explain(p, core.model, choice, rule=rule) if explain_choice else
               Why(tests[choice.test_index].id, choice.gain_bits, choice.cost_minutes, (), (), (), rule))
        return Proposal(tests[choice.test_index].id, choice.gain_bits, choice.cost_minutes, why,
                        prepare=pending(tests[choice.test_index], made))

    def preparations_made(self) -> frozenset[str]:
        """The preparations the readings so far have made (see ``assistant.preparation``)."""
        table = self._core.table
        return made_by(table, (table.test_index(t) for t, _ in self.answered))

    def _proposal(self, t: int, rule_id: str | None, p: np.ndarray | None = None,
                  remeasure: bool = False) -> Proposal:
        core = self._core
        probs = self._posterior if p is None else p
        gain = expected_gain(probs, core.model.tests[t])
        info = core.table.tests[t]
        made = self.preparations_made()
        cost = test_minutes(info, made)
        choice = Choice(t, gain, cost, gain / cost)
        return Proposal(info.id, gain, cost, explain(probs, core.model, choice, rule=rule_id),
                        remeasure, pending(info, made))

    def remeasure(self, test_id: str) -> Proposal:
        """A proposal to make an answered test again; its gain is reckoned without the old reading."""
        t = self._test_index(test_id)
        if not any(a[0] == test_id for a in self.answered):
            raise SessionError(f"test '{test_id}' has not been answered; there is nothing to re-measure")
        rest = [(self._core.table.test_index(x), r) for x, r in self.answered if x != test_id]
        p = normalise_log(self._log_prior + self._core.model.log_likelihood(rest))
        return self._proposal(t, None, p, remeasure=True)

    def _conclusion(self, reason: str, certain: bool, group: Sequence[int]) -> Conclusion:
        core = self._core
        p = self._posterior
        hyps = core.table.hypotheses
        top = int(np.argmax(p))
        members = tuple(group) if group else (top,)
        repairs = repair_order(p, core.model, first=members if certain else ())
        check_for = top if hyps[top].faults else None
        if check_for is None and repairs:
            check_for = core.table.hypothesis_index(repairs[0].fault_id)
        verify = verification_test(core.model, check_for) if check_for is not None else None
        return Conclusion(
            diagnosis=hyps[top].id if certain else None,
            probability=float(p[top]),
            stopped_because=reason,
            ranking=self.ranking(),
            repairs=repairs,
            verification_test=verify,
            group=tuple(hyps[h].id for h in members) if len(members) > 1 else (),
            group_probability=float(p[list(members)].sum()),
        )
