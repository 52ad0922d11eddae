"""The shop's decision rules, evaluated on durable-rules: the only module that imports ``durable``.

A ruleset's ``rules:`` are compiled once per process into one durable ruleset (named by the
ruleset id and the SHA-256 of its file, so an edited file compiles afresh). Each evaluation
posts the facts of one moment of a session (complaint, fault codes, vehicle attributes,
readings) under a fresh session id, collects the rules that fired, and deletes that session's
state. The actions themselves (scale a prior, rule out a fault, require a test first, add a
caution, recommend a test) are applied by the caller, in ruleset order, from the rule models.

Traps of durable-rules handled here, each with a test in tests/test_rules.py:

- One engine host per process: durable keeps a module-global host with timer threads; every
  ruleset is registered on that one host, once, under the lock.
- A fact that matches no rule is refused (``MessageNotHandledException``) and so never joins a
  later rule: a catch-all rule with a no-op action keeps every fact.
- An exception inside an action is swallowed into the session state: each action is wrapped,
  and any exception (or an ``exception`` key in the state) is raised as a RulesEngineError
  naming the rule and its place in the ruleset file.
- At most 1024 live sessions per ruleset (then ``MemoryError``): each evaluation deletes its
  session's state when done, also on errors.
- Posts on one ruleset are not safe from several threads: one lock serialises them.
- Strings that look like numbers are taken as numbers by the engine ("0420" is not the text
  "0420"): every text is sent with a prefix (``s:``) so that it stays text, and numbers travel
  in their own field. Semantics: a condition whose value is a number, or whose operator orders
  (lt, le, gt, ge), compares numbers; a text value that reads as a number compares as a number
  for ``vehicle.*`` and ``reading.*`` facts, and as text for ``complaint`` and ``fault_code``.
- Numbers written with an exponent (``1e-05``, as Python writes 10 uA) break the engine's
  JSON reader: numbers travel as whole millionths of the SI value, OL as a fixed huge value.
- ``contains`` (a text inside a fact's text) is computed here, since the engine's pattern
  matching does not cover it reliably; the result goes to the engine as a derived fact.
"""

from __future__ import annotations

import itertools
import logging
import math
import threading
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

from durable import engine as _durable_engine
from durable import lang as _durable

from assistant.errors import Problem, RulesEngineError, format_place
from assistant.record import VehicleInfo
from assistant.ruleset.load import LoadedRuleset
from assistant.ruleset.model import Condition, Rule

log = logging.getLogger("ohmtrail.rules")

_LOCK = threading.RLock()  # every call into durable goes through this lock
_COMPILED: dict[str, RuleEngine] = {}
_SESSION_IDS = itertools.count(1)

VEHICLE_FIELDS: tuple[str, ...] = tuple(VehicleInfo.model_fields)
TEXT_FACTS = ("complaint", "fault_code")
OVERLOAD = 1e12  # an OL reading in numeric comparisons (SI): above any number a rule can name
_SCALE = 1_000_000  # numbers travel as whole millionths: the engine cannot read 1e-05 or 1e+300

FactValue = str | int | float | bool

Hook = Callable[[str, Mapping[str, Any]], None]


def _text(value: FactValue) -> str:
    if isinstance(value, bool):
        return "s:true" if value else "s:false"
    if isinstance(value, (int, float)):
        if isinstance(value, float) and math.isinf(value):
            return "s:OL" if value > 0 else "s:-OL"
        if float(value).is_integer():
            return f"s:{int(value)}"
        return f"s:{float(value)!r}"
    return f"s:{value}"


def _wire(number: float) -> int:
    """A number as the engine receives it: whole millionths, clamped to the overload value."""
    return int(round(max(-OVERLOAD, min(OVERLOAD, number)) * _SCALE))


def _number(value: Any) -> float | None:
    if isinstance(value, bool):
        return None
    if isinstance(value, (int, float)):
        return max(-OVERLOAD, min(OVERLOAD, float(value)))
    if isinstance(value, str):
        text = value.strip()
        if text.upper() in ("OL", "+OL"):
            return OVERLOAD
        if text.upper() == "-OL":
            return -OVERLOAD
        try:
            number = float(text.replace("_", ""))
        except ValueError:
            return None
        return number if math.isfinite(number) else None
    return None


@dataclass(frozen=True)
class Evaluation:
    """What one evaluation found: the rules that fired, in ruleset order."""

    fired: tuple[str, ...]


class RuleEngine:
    """The compiled decision rules of one ruleset. Build with :func:`rule_engine`."""

    def __init__(self, loaded: LoadedRuleset) -> None:
        self.loaded = loaded
        self.rules: dict[str, Rule] = {}
        self.problems: tuple[Problem, ...] = tuple(check_rules(loaded))
        bad_rules = {p.field.split(".")[1] for p in self.problems if p.field}
        self.name = f"ohmtrail_{loaded.ruleset.id}_{loaded.sha256[:16]}"
        self._contains: list[tuple[str, str]] = []  # (fact, text) pairs computed here
        self._hook: Hook | None = None
        self._runs: dict[str, _Run] = {}
        order = {rule.id: i for i, rule in enumerate(loaded.ruleset.rules)}
        self._order = order
        for i, rule in enumerate(loaded.ruleset.rules):
            if str(i) not in bad_rules:
                self.rules[rule.id] = rule
        self._register()

    # ----------------------------------------------------------------- compile

    def _register(self) -> None:
        with _LOCK:
            with _durable.ruleset(self.name):
                for rule_id, rule in self.rules.items():
                    patterns = self._patterns(rule)
                    _durable.when_all(*patterns)(self._action(rule_id))
                # catch-all: a fact no rule names is kept, not refused
                _durable.when_all(+_durable.m.fact)(_noop)
            _durable.get_host()

    def _patterns(self, rule: Rule) -> list[Any]:
        m, c = _durable.m, _durable.c
        groups: dict[str, list[Condition]] = {}
        singles: list[tuple[str, list[Condition]]] = []
        for cond in rule.when:
            if cond.fact == "fault_code" or cond.op == "contains":
                singles.append((cond.fact, [cond]))  # each code (each derived fact) is its own fact
            else:
                groups.setdefault(cond.fact, []).append(cond)
        parts = singles + list(groups.items())
        patterns = []
        for j, (fact, conds) in enumerate(parts):
            expr = None
            for cond in conds:
                if cond.op == "contains":
                    self._contains.append((fact, str(cond.value)))
                    term = (m.fact == f"s:{fact}~{cond.value}") & (m.text == "s:true")
                else:
                    term = (m.fact == f"s:{fact}") & _comparison(cond)
                expr = term if expr is None else expr & term
            patterns.append(expr if len(parts) == 1 else getattr(c, f"c{j}") << expr)
        return patterns

    def _action(self, rule_id: str) -> Callable[[Any], None]:
        def act(closure: Any) -> None:
            sid = str(closure.s["sid"])
            run = self._runs.get(sid)
            if run is None or run.error is not None:
                return
            try:
                if self._hook is not None:
                    self._hook(rule_id, dict(run.facts))
                run.fired.append(rule_id)
            except Exception as exc:  # surfaced below as a located RulesEngineError
                run.error = (rule_id, exc)
        act.__name__ = f"rule_{rule_id}"
        return act

    # ----------------------------------------------------------------- evaluate

    def evaluate(self, facts: Iterable[tuple[str, FactValue]], *, hook: Hook | None = None) -> Evaluation:
        """Post the facts under a fresh session; the rules that fired (in ruleset order).

        ``hook`` (for tests and tracing) is called inside each firing action; if it raises, the
        evaluation raises a RulesEngineError located at the rule.
        """
        if not self.rules:
            return Evaluation(())
        plain = list(dict.fromkeys((name, value) for name, value in facts))
        messages = []
        for name, value in plain:
            messages.append(self._message(name, value))
        for fact, text in dict.fromkeys(self._contains):
            present = any(name == fact and text.lower() in str(value).lower() for name, value in plain)
            messages.append({"fact": f"s:{fact}~{text}", "text": _text(present)})
        if not messages:
            return Evaluation(())
        with _LOCK:
            sid = f"e{next(_SESSION_IDS)}"
            run = _Run(dict(plain))
            self._runs[sid] = run
            self._hook = hook
            host = _durable.get_host()
            try:
                for message in messages:
                    try:
                        host.assert_fact(self.name, dict(message, sid=sid))
                    except _durable_engine.MessageObservedException:
                        continue  # the same fact twice: once is enough
                state = host.get_state(self.name, sid)
            except RulesEngineError:
                raise
            except Exception as exc:
                raise RulesEngineError(f"{self._place(None)}: the decision rules could not be "
                                       f"evaluated: {exc}") from exc
            finally:
                self._hook = None
                self._runs.pop(sid, None)
                try:
                    host.delete_state(self.name, sid)
                except Exception:  # pragma: no cover - nothing left to delete
                    log.debug("state %s of %s already gone", sid, self.name)
        if run.error is not None:
            rule_id, cause = run.error
            raise RulesEngineError(f"{self._place(rule_id)}: rule '{rule_id}' failed while it was "
                                   f"evaluated: {cause}") from cause
        if isinstance(state, dict) and state.get("exception"):
            raise RulesEngineError(f"{self._place(None)}: a decision rule failed: "
                                   f"{str(state['exception']).split(', traceback')[0]}")
        fired = sorted(dict.fromkeys(run.fired), key=lambda r: self._order[r])
        return Evaluation(tuple(fired))

    def _message(self, name: str, value: FactValue) -> dict[str, Any]:
        message: dict[str, Any] = {"fact": f"s:{name}", "text": _text(value)}
        if name not in TEXT_FACTS:
            number = _number(value)
            if number is not None:
                message["num"] = _wire(number)
        return message

    def _place(self, rule_id: str | None) -> str:
        loaded = self.loaded
        if rule_id is None:
            return loaded.path
        i = self._order[rule_id]
        line, col = loaded.locator.locate(("rules", i, "id"))
        return format_place(loaded.path, line, col)


@dataclass
class _Run:
    facts: dict[str, FactValue]
    fired: list[str]
    error: tuple[str, Exception] | None

    def __init__(self, facts: dict[str, FactValue]) -> None:
        self.facts = facts
        self.fired = []
        self.error = None


def _noop(closure: Any) -> None:
    """The catch-all rule's action: nothing."""


def _comparison(cond: Condition) -> Any:
    m = _durable.m
    value = cond.value
    numeric_fact = cond.fact not in TEXT_FACTS
    op = cond.op
    if op == "in":
        values = value if isinstance(value, tuple) else (value,)
        expr = None
        for v in values:
            term = _equal(m, v, numeric_fact)
            expr = term if expr is None else expr | term
        return expr
    if op in ("lt", "le", "gt", "ge"):
        number = _wire(_number(value))  # type: ignore[arg-type]  # check_rules left out non-numbers
        field = m.num
        return {"lt": field < number, "le": field <= number, "gt": field > number, "ge": field >= number}[op]
    if op == "ne":
        given = _number(value) if numeric_fact or not isinstance(value, str) else None
        if given is not None and not isinstance(value, bool):
            return m.num != _wire(given)
        return m.text != _text(value)  # type: ignore[arg-type]  # check_rules allows a list only for 'in'
    return _equal(m, value, numeric_fact)


def _equal(m: Any, value: Any, numeric_fact: bool) -> Any:
    if isinstance(value, bool):
        return m.text == _text(value)
    if isinstance(value, (int, float)) or (numeric_fact and _number(value) is not None):
        return m.num == _wire(_number(value))  # type: ignore[arg-type]
    return m.text == _text(value)


def check_rules(loaded: LoadedRuleset) -> list[Problem]:
    """Located problems of rules the engine cannot take (unknown fact fields, non-numbers
    compared by order); such rules are left out and the rest still run."""
    rs = loaded.ruleset
    tests = {t.id for t in rs.tests}
    problems = []
    for i, rule in enumerate(rs.rules):
        for j, cond in enumerate(rule.when):
            path: tuple[str | int, ...] = ("rules", i, "when", j, "fact")
            if cond.fact.startswith("vehicle.") and cond.fact.split(".", 1)[1] not in VEHICLE_FIELDS:
                problems.append(loaded.locator.problem(
                    f"rule '{rule.id}' names unknown fact field '{cond.fact}' (known: "
                    f"{', '.join('vehicle.' + f for f in VEHICLE_FIELDS)}); the rule is left out",
                    path, cond.fact))
            elif cond.fact.startswith("reading.") and cond.fact.split(".", 1)[1] not in tests:
                problems.append(loaded.locator.problem(
                    f"rule '{rule.id}' names unknown test in '{cond.fact}'; the rule is left out",
                    path, cond.fact))
            elif cond.op in ("lt", "le", "gt", "ge") and _number(cond.value) is None:
                problems.append(loaded.locator.problem(
                    f"rule '{rule.id}' compares '{cond.fact}' with '{cond.value}', which is not a "
                    f"number; the rule is left out", ("rules", i, "when", j, "value"), cond.value))
            elif cond.op == "contains" and not isinstance(cond.value, str):
                problems.append(loaded.locator.problem(
                    f"rule '{rule.id}': 'contains' needs a text value; the rule is left out",
                    ("rules", i, "when", j, "value"), cond.value))
    return problems


def rule_engine(loaded: LoadedRuleset) -> RuleEngine:
    """The compiled rules of a ruleset, compiled once per process per file content."""
    key = f"{loaded.ruleset.id}:{loaded.sha256}"
    with _LOCK:
        found = _COMPILED.get(key)
        if found is None:
            found = RuleEngine(loaded)
            _COMPILED[key] = found
        return found


def reading_fact(value: float | None, overload: bool, outcome: str | None) -> FactValue:
    """The value a reading takes as a rule fact: the SI number, OL as a huge number, or the answer."""
    if outcome is not None:
        return outcome
    if overload:
        return "OL"
    return float(value) if value is not None else ""


def context_facts(complaint: str | None, fault_codes: Sequence[str],
                  vehicle: Mapping[str, Any]) -> list[tuple[str, FactValue]]:
    """The facts of a session's start: complaint, each fault code, each vehicle attribute."""
    facts: list[tuple[str, FactValue]] = []
    if complaint:
        facts.append(("complaint", complaint))
    facts.extend(("fault_code", code) for code in fault_codes)
    for key, value in vehicle.items():
        if value is not None and isinstance(value, (str, int, float, bool)):
            facts.append((f"vehicle.{key}", value))
    return facts
