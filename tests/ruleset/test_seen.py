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


def _write(tmp_path: Path, look: str) -> Path:
    path = tmp_path / "pair.yaml"
    path.write_text(BASE % {"look": look}, encoding="utf-8")
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
