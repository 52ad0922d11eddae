"""Observations whose answers follow the circuit (``seen``): what the format takes and refuses.

Which lamps light is the first look at a lamp complaint (common practice); with ``seen`` the
answer comes from the circuit model, each simulated vehicle's own, instead of rows of
likelihoods written by hand for every fault.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from assistant.errors import RulesetError
from assistant.ruleset import lint_ruleset, load_ruleset

BASE = """\
format: 1
id: pair
title: two lamps on a fuse
family: lamp
version: "1"
system_voltage: 12 V
nodes:
  B: {}
  F: {}
components:
  - {id: bat, type: battery, nodes: [B, GND], emf: 12.6 V}
  - {id: f1, type: fuse, nodes: [B, F], rating: 10 A}
  - {id: left, type: lamp, nodes: [F, GND], rating: 21 W}
  - {id: right, type: lamp, nodes: [F, GND], rating: 21 W}
states:
  on: {label: on}
tests:
  - id: look
    kind: observation
    question: Which lamps light?
    outcomes: [both, left_only, right_only, neither]
    state: on
%(look)s
"""

GOOD = """\
    seen:
      parts: [left, right]
      answers: {both: [lit, lit], left_only: [lit, dark], right_only: [dark, lit], neither: [dark, dark]}
    misjudged: 0.05"""


def _write(tmp_path: Path, look: str, base: str = BASE) -> Path:
    path = tmp_path / "pair.yaml"
    path.write_text(base % {"look": look}, encoding="utf-8")
    return path


def test_a_seen_look_loads_and_lints_clean(tmp_path: Path) -> None:
    loaded = load_ruleset(_write(tmp_path, GOOD))
    test = loaded.ruleset.tests[0]
    assert test.seen is not None and test.likelihoods is None and test.misjudged == 0.05
    # one pattern written flat is a list of one; the default threshold is a quarter
    assert test.seen.answers["both"] == (("lit", "lit"),) and test.seen.lit_above == 0.25
    assert test.seen.answer_of(["dark", "lit"]) == "right_only"
    assert lint_ruleset(loaded) == []


@pytest.mark.parametrize("look, message", [
    (GOOD + "\n    likelihoods: {default: {both: 1, left_only: 0, right_only: 0, neither: 0}}",
     "either likelihoods or seen"),
    ("""\
    seen:
      parts: [left, right]
      answers: {both: [lit, lit], left_only: [lit, dark], right_only: [dark, lit], neither: [dark, lit]}""",
     "no answer when the parts are (dark, dark)"),
    ("""\
    seen:
      parts: [left, right]
      answers: {both: [lit, lit], left_only: [lit, dark], right_only: [dark, lit]}""",
     "a pattern for every outcome"),
    ("""\
    seen:
      parts: [left, right]
      answers: {both: [full, full], left_only: [lit, dark], right_only: [dark, lit], neither: [any, any]}""",
     "give full_above"),
    ("""\
    seen:
      parts: [left]
      answers: {both: [lit, lit], left_only: [lit], right_only: [dark], neither: [dark]}""",
     "for each of the 1 parts"),
    ("""\
    seen:
      parts: [left, right]
      full_above: 0.2
      answers: {both: [lit, lit], left_only: [lit, dark], right_only: [dark, lit], neither: [dark, dark]}""",
     "full_above must be above lit_above"),
])
def test_bad_seen_looks_are_refused_with_the_line(tmp_path: Path, look: str, message: str) -> None:
    path = _write(tmp_path, look)
    with pytest.raises(RulesetError) as err:
        load_ruleset(path)
    text = str(err.value)
    assert message in text and "pair.yaml" in text and ":" in text.split("pair.yaml", 1)[1]


def test_misjudged_without_seen_is_refused_at_its_line(tmp_path: Path) -> None:
    # hand-written rows already hold the chance of a wrong answer; a misjudged beside them
    # would be read by nothing, so it is refused rather than silently dropped
    look = """\
    likelihoods: {default: {both: 0.97, left_only: 0.01, right_only: 0.01, neither: 0.01}}
    misjudged: 0.05"""
    with pytest.raises(RulesetError) as err:
        load_ruleset(_write(tmp_path, look))
    text = str(err.value)
    assert "misjudged applies to a look written with seen" in text
    assert "pair.yaml:24:16: tests.0.misjudged:" in text


@pytest.mark.parametrize("part, message", [
    ("lamp_x", "unknown component 'lamp_x'"),
    ("f1", "'f1' is a fuse: seen looks at lamps and loads"),
])
def test_a_seen_part_must_be_a_lamp_or_load_of_the_circuit(tmp_path: Path, part: str, message: str) -> None:
    loaded = load_ruleset(_write(tmp_path, GOOD.replace("[left, right]", f"[left, {part}]")))
    problems = lint_ruleset(loaded)
    assert len(problems) == 1 and problems[0].message.startswith(message)
    # where it is: the line of the parts list, the field down to the part
    assert (problems[0].line, problems[0].field) == (24, "tests.0.seen.parts.1")


# A relay is heard as it pulls in (common practice): its coil among the parts, pulled_in or
# released, with since the state the controls come from.
RELAY_BASE = BASE.replace("""  - {id: right, type: lamp, nodes: [F, GND], rating: 21 W}
""", """  - {id: right, type: lamp, nodes: [F, GND], rating: 21 W}
  - {id: sw, type: switch, nodes: [B, C]}
  - {id: coil, type: relay_coil, nodes: [C, GND], resistance: 80 ohm, pull_in: 50 mA}
""").replace("""  F: {}
""", """  F: {}
  C: {}
""").replace("""  on: {label: on}
""", """  on: {label: on, closes: [sw]}
  off: {label: off}
""")

CLICK = """\
    seen:
      parts: [coil, left]
      since: off
      answers: {both: [pulled_in, lit], left_only: [pulled_in, dark], right_only: [released, lit], neither: [released, dark]}"""


def _write_relay(tmp_path: Path, look: str) -> Path:
    return _write(tmp_path, look, RELAY_BASE)


def test_a_relay_look_loads_and_lints_clean(tmp_path: Path) -> None:
    loaded = load_ruleset(_write_relay(tmp_path, CLICK))
    seen = loaded.ruleset.tests[0].seen
    assert seen is not None and seen.since == "off" and seen.relay_parts() == (0,)
    # pulled_in fits the relay's top level, released its dark one
    assert seen.answer_of(["lit", "dark"]) == "left_only" and seen.answer_of(["dark", "lit"]) == "right_only"
    assert lint_ruleset(loaded) == []


@pytest.mark.parametrize("look, message, field", [
    (CLICK.replace("[pulled_in, lit], left_only: [pulled_in, dark]", "[lit, lit], left_only: [lit, dark]")
     .replace("[released, lit], neither: [released, dark]", "[dark, lit], neither: [dark, dark]"),
     "'coil' is a relay coil: say pulled_in or released", "tests.0.seen.answers"),
    (CLICK.replace("[coil, left]", "[left, coil]"), "'left' is a lamp: say lit, dark, dim or full",
     "tests.0.seen.answers"),
    (CLICK.replace("since: off", "since: parked"), "unknown state 'parked'", "tests.0.seen.since"),
    (CLICK.replace("since: off", "since: on"), "since names the test's own state", "tests.0.seen.since"),
    (GOOD.replace("parts: [left, right]", "parts: [left, right]\n      since: off"),
     "since applies to relay coils", "tests.0.seen.since"),
])
def test_a_relay_look_is_linted_at_its_field(tmp_path: Path, look: str, message: str, field: str) -> None:
    problems = lint_ruleset(load_ruleset(_write_relay(tmp_path, look)))
    # (parts swapped: the lamp spoken of as a relay and the relay as a lamp, one problem each)
    assert len(problems) == (2 if "[left, coil]" in look else 1), problems
    assert problems[0].message.startswith(message), problems
    assert all(p.field == field and p.line is not None for p in problems)


def test_a_part_is_a_lamp_or_a_relay_not_both(tmp_path: Path) -> None:
    look = CLICK.replace("neither: [released, dark]", "neither: [dark, dark]")
    with pytest.raises(RulesetError) as err:
        load_ruleset(_write_relay(tmp_path, look))
    assert "part 'coil' is given both a lamp's words" in str(err.value) and "pair.yaml:" in str(err.value)
