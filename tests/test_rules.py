"""The durable-rules adapter and each of the engine's traps it handles."""

from __future__ import annotations

import threading
from collections.abc import Mapping
from pathlib import Path
from typing import Any

import pytest

from assistant.diagnosis import Context, Diagnosis
from assistant.errors import RulesEngineError
from assistant.reading import Reading
from assistant.ruleset import load_ruleset
from assistant.rules import RuleEngine, check_rules, context_facts, rule_engine
from synthetic_tables import TINY_LAMP, tiny_lamp

LOADED, TABLE = tiny_lamp()


def fired(facts: list[tuple[str, Any]]) -> tuple[str, ...]:
    return rule_engine(LOADED).evaluate(facts).fired


def test_rules_fire_on_their_facts() -> None:
    assert fired([("complaint", "out")]) == ("fuse_first",)
    assert fired([("reading.look_fuse", "yes")]) == ("blown_caution",)
    assert fired([("complaint", "other")]) == ()


def test_one_engine_per_ruleset_and_one_host_per_process() -> None:
    """Trap: durable keeps one global host and refuses a ruleset registered twice."""
    from durable import lang

    first = rule_engine(LOADED)
    again = rule_engine(load_ruleset(TINY_LAMP))  # the same file read again: same content hash
    assert first is again
    assert lang.get_host() is lang.get_host()
    with pytest.raises(Exception, match="already registered"):
        RuleEngine(LOADED)  # what the cache prevents


def test_a_fact_no_rule_names_is_kept_not_refused() -> None:
    """Trap: a fact matching no rule raises MessageNotHandledException without a catch-all."""
    assert fired([("vehicle.fleet_number", "V17"), ("complaint", "out")]) == ("fuse_first",)
    assert fired([("vehicle.fleet_number", "V17")]) == ()


@pytest.mark.parametrize("facts, expected", [
    ([("fault_code", "0420")], ("code_caution",)),  # a code that looks like a number stays text
    ([("fault_code", "420")], ()),  # ... so 420 is another code
    ([("fault_code", "0420.0")], ()),
    ([("vehicle.odometer_km", 150001)], ("old_van_ground",)),  # number vs the text "150000"
    ([("vehicle.odometer_km", "150001")], ("old_van_ground",)),  # typed text compares as a number
    ([("vehicle.odometer_km", 149999.5)], ()),
    ([("vehicle.odometer_km", "lots")], ()),  # not a number: the ordered comparison does not hold
])
def test_numeric_looking_strings(facts: list[tuple[str, Any]], expected: tuple[str, ...]) -> None:
    """Trap: the engine takes strings that look like numbers for numbers."""
    assert fired(facts) == expected


def test_an_exception_inside_an_action_is_a_located_error() -> None:
    """Trap: durable swallows an action's exception into the session state."""

    def boom(rule_id: str, facts: Mapping[str, Any]) -> None:
        raise ValueError("hook failed")

    with pytest.raises(RulesEngineError) as info:
        rule_engine(LOADED).evaluate([("complaint", "out")], hook=boom)
    message = str(info.value)
    assert "tiny_lamp.yaml:" in message and "rule 'fuse_first'" in message and "hook failed" in message
    line = int(message.split("tiny_lamp.yaml:")[1].split(":")[0])
    assert "id: fuse_first" in TINY_LAMP.read_text().splitlines()[line - 1]
    # the engine is still usable afterwards
    assert fired([("complaint", "out")]) == ("fuse_first",)


def test_more_evaluations_than_the_session_limit() -> None:
    """Trap: at most 1024 live sessions per ruleset; each evaluation deletes its state."""
    engine = rule_engine(LOADED)
    for i in range(1200):
        assert engine.evaluate([("complaint", "out"), ("vehicle.odometer_km", i)]).fired == ("fuse_first",)


def test_concurrent_evaluations_each_get_their_own_answer() -> None:
    """Trap: posts on one ruleset from several threads are unsafe; the adapter locks."""
    engine = rule_engine(LOADED)
    errors: list[str] = []

    def work(n: int) -> None:
        for i in range(60):
            code = "0420" if (n + i) % 2 else "9999"
            got = engine.evaluate([("fault_code", code), ("vehicle.odometer_km", 200000 + i)]).fired
            want = ("old_van_ground", "code_caution") if code == "0420" else ("old_van_ground",)
            if got != want:
                errors.append(f"{code}: {got}")

    threads = [threading.Thread(target=work, args=(n,)) for n in range(6)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert errors == []


def test_unknown_fact_field_is_reported_and_the_rule_left_out(tmp_path: Path) -> None:
    text = TINY_LAMP.read_text().replace("vehicle.odometer_km", "vehicle.colour")
    path = tmp_path / "bad_field.yaml"
    path.write_text(text.replace("id: tiny_lamp", "id: tiny_lamp_bad"))
    loaded = load_ruleset(path)
    problems = check_rules(loaded)
    assert len(problems) == 1
    assert "unknown fact field 'vehicle.colour'" in problems[0].message
    assert problems[0].file == str(path) and problems[0].line is not None
    # the session goes on: the warning is there, the other rules still fire
    d = Diagnosis.start(loaded, TABLE, Context(complaint="out", vehicle={"colour": "white"}))
    assert any("vehicle.colour" in w for w in d.warnings)
    assert d.rules_fired == ("fuse_first",)


def test_context_facts() -> None:
    facts = context_facts("out", ("P1", "P2"), {"vin": "X1", "odometer_km": 12.0, "notes": None})
    assert facts == [("complaint", "out"), ("fault_code", "P1"), ("fault_code", "P2"),
                     ("vehicle.vin", "X1"), ("vehicle.odometer_km", 12.0)]


def test_rules_change_the_diagnosis() -> None:
    """Scale and caution and require_first reach the facade."""
    plain = Diagnosis.start(LOADED, TABLE, Context())
    old = Diagnosis.start(LOADED, TABLE, Context(vehicle={"odometer_km": 210000}))
    i = TABLE.hypothesis_index("strap.high_resistance")
    assert old.posterior()[i] > 2 * plain.posterior()[i]
    assert old.rules_fired == ("old_van_ground",)
    d = old.answer("look_fuse", Reading("yes", outcome="yes"))
    assert "blown_caution" in d.rules_fired and d.cautions


def test_numbers_the_engine_json_cannot_read(tmp_path: Path) -> None:
    """Trap: the engine cannot read exponent notation (10 uA is 1e-05 to Python)."""
    text = TINY_LAMP.read_text().replace(
        "  - id: code_caution\n",
        "  - id: tiny_draw\n    when: [{fact: reading.drop_gnd, op: lt, value: 0.00005}]\n"
        "    then: [{caution: very small}]\n"
        "  - id: lamp_open_reading\n    when: [{fact: reading.r_lamp, value: OL}]\n"
        "    then: [{caution: lamp open}]\n"
        "  - id: code_caution\n").replace("id: tiny_lamp", "id: tiny_lamp_numbers")
    path = tmp_path / "numbers.yaml"
    path.write_text(text)
    engine = rule_engine(load_ruleset(path))
    assert engine.evaluate([("reading.drop_gnd", 1e-05)]).fired == ("tiny_draw",)
    assert engine.evaluate([("reading.drop_gnd", 2e-04)]).fired == ()
    assert engine.evaluate([("reading.r_lamp", "OL")]).fired == ("lamp_open_reading",)
    assert engine.evaluate([("reading.r_lamp", 0.7)]).fired == ()
