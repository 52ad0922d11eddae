"""Semantic checks of a ruleset beyond its schema: references, ids, paths to ground.

``lint_ruleset`` returns located problems; it never raises for a bad ruleset. ``lint_paths``
loads and checks files or folders and returns every problem found, so one run reports all of
them.
"""

from __future__ import annotations

from collections import Counter
from collections.abc import Iterable, Iterator
from dataclasses import dataclass
from pathlib import Path

from assistant.disjoint import DisjointSets
from assistant.errors import Problem, RulesetError
from assistant.ruleset.defaults import DEFAULT_MODES, fault_list
from assistant.ruleset.load import LoadedRuleset, load_ruleset, ruleset_files
from assistant.ruleset.model import (
    SEEN_PART_TYPES,
    CurrentTest,
    DropTest,
    FuseDropTest,
    ObservationTest,
    ResistanceTest,
    Ruleset,
    VoltageTest,
)

# Modes any two-terminal part can have, on top of its type's own defaults.
GENERIC_MODES = frozenset({"open", "short_to_ground", "short_to_power", "high_resistance"})


def allowed_modes(component_type: str) -> frozenset[str]:
    """The fault modes a component of this type can be given."""
    return GENERIC_MODES | frozenset(DEFAULT_MODES.get(component_type, {}))


@dataclass(frozen=True)
class LintResult:
    """What linting some paths found."""

    files: int
    problems: tuple[Problem, ...]


def lint_paths(paths: Iterable[str | Path]) -> LintResult:
    """Load and check every ruleset file under ``paths``; collect all problems."""
    problems: list[Problem] = []
    count = 0
    for path in ruleset_files(paths):
        count += 1
        try:
            loaded = load_ruleset(path)
        except RulesetError as exc:
            problems.extend(exc.problems)
            continue
        problems.extend(lint_ruleset(loaded))
    return LintResult(count, tuple(problems))


def check_ruleset(loaded: LoadedRuleset) -> LoadedRuleset:
    """The ruleset if it lints clean; otherwise a RulesetError with every problem."""
    problems = lint_ruleset(loaded)
    if problems:
        raise RulesetError.from_problems(problems)
    return loaded


def lint_ruleset(loaded: LoadedRuleset) -> list[Problem]:
    """Every semantic problem of a schema-valid ruleset, located."""
    return list(_Checker(loaded).run())


class _Checker:
    def __init__(self, loaded: LoadedRuleset) -> None:
        self.loc = loaded.locator
        self.rs: Ruleset = loaded.ruleset
        self.nodes = set(self.rs.nodes) | {self.rs.ground}
        self.components = {c.id: c for c in self.rs.components}
        self.tests = {t.id: t for t in self.rs.tests}
        self.faults = {f.id for f in fault_list(self.rs)}
        self.all_modes = {f"{c.id}.{m}" for c in self.rs.components for m in allowed_modes(c.type)}

    def run(self) -> Iterator[Problem]:
        yield from self._duplicates()
        yield from self._components()
        yield from self._states()
        yield from self._preparations()
        yield from self._tests()
        yield from self._complaints()
        yield from self._rules()
        yield from self._cases()
        yield from self._paths_to_ground()
        if not self.faults:
            yield self.loc.problem("the ruleset has no fault with a positive weight", ("components",))

    def _p(self, message: str, *path: str | int, at_key: bool = False) -> Problem:
        return self.loc.problem(message, path, at_key=at_key)

    def _node(self, name: str | None, *path: str | int) -> Iterator[Problem]:
        if name is not None and name not in self.nodes:
            yield self._p(f"unknown node '{name}' (not under nodes:)", *path)

    def _fault_ref(self, ref: str, *path: str | int, components_too: bool = False) -> Iterator[Problem]:
        if ref == "none" or ref in self.faults:
            return
        if components_too and ref in self.components:
            return
        if ref in self.all_modes:
            yield self._p(f"fault '{ref}' is switched off (weight 0)", *path)
        else:
            yield self._p(f"unknown fault '{ref}'", *path)

    def _test_ref(self, ref: str, *path: str | int) -> Iterator[Problem]:
        if ref not in self.tests:
            yield self._p(f"unknown test '{ref}'", *path)

    def _duplicates(self) -> Iterator[Problem]:
        for section in ("components", "tests", "complaints", "rules", "cases"):
            items = getattr(self.rs, section)
            counts = Counter(item.id for item in items)
            seen: set[str] = set()
            for i, item in enumerate(items):
                if counts[item.id] > 1:
                    if item.id in seen:
                        yield self._p(f"duplicate id '{item.id}' in {section}", section, i, "id")
                    seen.add(item.id)
        both = set(self.components) & set(self.tests)
        for name in sorted(both):
            yield self._p(f"'{name}' is both a component and a test id", "tests")

    def _components(self) -> Iterator[Problem]:
        for i, comp in enumerate(self.rs.components):
            for j, node in enumerate(comp.nodes):
                yield from self._node(node, "components", i, "nodes", j)
            for mode, spec in comp.faults.items():
                if mode not in allowed_modes(comp.type):
                    yield self._p(f"a {comp.type} cannot have fault mode '{mode}'; it can have "
                                  f"{sorted(allowed_modes(comp.type))}", "components", i, "faults", mode, at_key=True)
                yield from self._node(spec.at, "components", i, "faults", mode, "at")
                if spec.to is not None:
                    if mode != "short_to_power":
                        yield self._p(f"'to' applies only to short_to_power, not to '{mode}'", "components", i,
                                      "faults", mode, "to")
                    yield from self._node(spec.to, "components", i, "faults", mode, "to")
            if comp.type == "relay_contact":
                coil = self.components.get(comp.coil)
                if coil is None or coil.type != "relay_coil":
                    yield self._p(f"'{comp.coil}' is not a relay_coil of this ruleset", "components", i, "coil")
            if comp.type == "module_supply" and comp.states:
                for j, s in enumerate(comp.states):
                    if s not in self.rs.states:
                        yield self._p(f"unknown state '{s}'", "components", i, "states", j)
        if self.rs.power is not None:
            yield from self._node(self.rs.power, "power")
        if not any(c.type in ("battery", "module_supply") for c in self.rs.components):
            yield self._p("the circuit has no source (battery or module_supply)", "components")

    def _states(self) -> Iterator[Problem]:
        for name, state in self.rs.states.items():
            for j, ref in enumerate(state.closes):
                comp = self.components.get(ref)
                if comp is None:
                    yield self._p(f"state '{name}' closes unknown contact '{ref}'", "states", name, "closes", j)
                elif comp.type != "switch":
                    yield self._p(f"state '{name}' names '{ref}', a {comp.type}, not a switch", "states", name,
                                  "closes", j)

    def _preparations(self) -> Iterator[Problem]:
        needed = {ref for test in self.rs.tests for ref in test.prepare}
        for name in self.rs.preparations:
            if name not in needed:
                yield self._p(f"preparation '{name}' is needed by no test", "preparations", name, at_key=True)

    def _tests(self) -> Iterator[Problem]:
        for i, test in enumerate(self.rs.tests):
            if test.state is not None and test.state not in self.rs.states:
                yield self._p(f"unknown state '{test.state}'", "tests", i, "state")
            for j, ref in enumerate(test.prepare):
                if ref not in self.rs.preparations:
                    yield self._p(f"unknown preparation '{ref}'", "tests", i, "prepare", j)
            if isinstance(test, VoltageTest):
                yield from self._node(test.at, "tests", i, "at")
                yield from self._node(test.reference, "tests", i, "reference")
            elif isinstance(test, (DropTest, ResistanceTest)):
                for j, node in enumerate(test.between):
                    yield from self._node(node, "tests", i, "between", j)
                if test.between[0] == test.between[1]:
                    yield self._p("a test between a node and itself", "tests", i, "between")
                if isinstance(test, ResistanceTest):
                    for key in ("isolate", "only"):
                        for j, ref in enumerate(getattr(test, key)):
                            if ref not in self.components:
                                yield self._p(f"unknown component '{ref}'", "tests", i, key, j)
            elif isinstance(test, CurrentTest):
                if test.component not in self.components:
                    yield self._p(f"unknown component '{test.component}'", "tests", i, "component")
                for j, ref in enumerate(test.isolate):
                    if ref not in self.components:
                        yield self._p(f"unknown component '{ref}'", "tests", i, "isolate", j)
                    elif ref == test.component:
                        yield self._p(f"'{ref}' is the component the current is read in; it cannot be "
                                      "isolated too", "tests", i, "isolate", j)
            elif isinstance(test, FuseDropTest):
                comp = self.components.get(test.fuse)
                if comp is None or comp.type != "fuse":
                    yield self._p(f"'{test.fuse}' is not a fuse of this ruleset", "tests", i, "fuse")
            elif isinstance(test, ObservationTest):
                for key in test.likelihoods or ():
                    if key != "default":
                        yield from self._fault_ref(key, "tests", i, "likelihoods", key, components_too=True)
                if test.seen is not None:
                    yield from self._seen(test, i)

    def _seen(self, test: ObservationTest, i: int) -> Iterator[Problem]:
        """A look's parts: lamps and loads spoken of as lit or dark, relay coils as pulled in or
        released; ``since`` a known state, and only for relays."""
        seen = test.seen
        assert seen is not None
        relays = seen.relay_parts()
        relay_coils = 0
        for j, ref in enumerate(seen.parts):
            comp = self.components.get(ref)
            if comp is None:
                yield self._p(f"unknown component '{ref}'", "tests", i, "seen", "parts", j)
            elif comp.type not in SEEN_PART_TYPES:
                yield self._p(f"'{ref}' is a {comp.type}: seen looks at lamps and loads, which have a "
                              "rated current to be lit against, and at relay coils, which pull in or not "
                              "(a motor's current does not say whether it turns)", "tests", i, "seen", "parts", j)
            elif comp.type == "relay_coil":
                relay_coils += 1
                if j not in relays:
                    yield self._p(f"'{ref}' is a relay coil: say pulled_in or released for it (or any), "
                                  "not lit, dark, dim or full", "tests", i, "seen", "answers")
            elif j in relays:
                yield self._p(f"'{ref}' is a {comp.type}: say lit, dark, dim or full for it (or any); "
                              "pulled_in and released are a relay coil's", "tests", i, "seen", "answers")
        if seen.since is not None:
            if seen.since not in self.rs.states:
                yield self._p(f"unknown state '{seen.since}'", "tests", i, "seen", "since")
            elif seen.since == test.state:
                yield self._p("since names the test's own state: a relay cannot pull in going from a state "
                              "to itself", "tests", i, "seen", "since")
            if not relay_coils:
                yield self._p("since applies to relay coils (a click as they pull in); this look has none",
                              "tests", i, "seen", "since")

    def _complaints(self) -> Iterator[Problem]:
        for i, complaint in enumerate(self.rs.complaints):
            for j, ref in enumerate(complaint.suspects):
                yield from self._fault_ref(ref, "complaints", i, "suspects", j, components_too=True)

    def _rules(self) -> Iterator[Problem]:
        complaints = {c.id for c in self.rs.complaints}
        for i, rule in enumerate(self.rs.rules):
            for j, cond in enumerate(rule.when):
                if cond.fact.startswith("reading."):
                    yield from self._test_ref(cond.fact.split(".", 1)[1], "rules", i, "when", j, "fact")
                if cond.fact == "complaint" and isinstance(cond.value, str) and cond.value not in complaints:
                    yield self._p(f"unknown complaint '{cond.value}'", "rules", i, "when", j, "value")
            for j, action in enumerate(rule.then):
                if action.scale is not None:
                    yield from self._fault_ref(action.scale[0], "rules", i, "then", j, "scale", components_too=True)
                if action.rule_out is not None:
                    yield from self._fault_ref(action.rule_out, "rules", i, "then", j, "rule_out",
                                               components_too=True)
                for ref, key in ((action.require_first, "require_first"), (action.recommend, "recommend")):
                    if ref is not None:
                        yield from self._test_ref(ref, "rules", i, "then", j, key)

    def _cases(self) -> Iterator[Problem]:
        complaints = {c.id for c in self.rs.complaints}
        for i, case in enumerate(self.rs.cases):
            if case.complaint is not None and case.complaint not in complaints:
                yield self._p(f"unknown complaint '{case.complaint}'", "cases", i, "complaint")
            for key in case.readings:
                yield from self._test_ref(key, "cases", i, "readings", key)
            yield from self._fault_ref(case.expect, "cases", i, "expect")
            for j, ref in enumerate(case.order or ()):
                yield from self._test_ref(ref, "cases", i, "order", j)

    def _paths_to_ground(self) -> Iterator[Problem]:
        """Each component must be part of a closed loop (a path back through ground) in some state.

        A part is in a loop when its terminals stay joined through the other conducting parts
        with the part itself taken out; a dangling branch fails this in every state. Switches
        conduct in the states that close them; relay contacts are taken as closed (their coil
        may pull them in).
        """
        closing: dict[str, set[str]] = {}
        for name, state in self.rs.states.items():
            for ref in state.closes:
                closing.setdefault(ref, set()).add(name)
        in_loop: set[str] = set()
        for name, state in self.rs.states.items():
            conducting = [c for c in self.rs.components if c.type != "switch" or c.id in state.closes]
            for comp in conducting:
                if comp.id in in_loop:
                    continue
                sets: DisjointSets[str] = DisjointSets()
                for other in conducting:
                    if other is not comp:
                        for node in other.nodes[1:]:
                            sets.union(node, other.nodes[0])
                if all(sets.joined(n, comp.nodes[0]) for n in comp.nodes[1:]):
                    in_loop.add(comp.id)
        for i, comp in enumerate(self.rs.components):
            if comp.type == "switch" and comp.id not in closing:
                yield self._p(f"switch '{comp.id}' is closed by no state (list it under a state's closes:)",
                              "components", i, "id")
            elif comp.id not in in_loop:
                yield self._p(f"component '{comp.id}' has no path to ground in any state (it is in no closed "
                              "loop)", "components", i, "nodes")


def summary(result: LintResult) -> str:
    """The one-line summary of a clean or failed lint run."""
    files = f"{result.files} ruleset{'s' if result.files != 1 else ''}"
    if not result.problems:
        return f"ok: {files} checked, no problems"
    n = len(result.problems)
    return f"{n} problem{'s' if n != 1 else ''} in {files}"
