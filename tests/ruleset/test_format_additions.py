"""The additive fields of format v1: ``isolate`` on current tests and ``to`` on short_to_power.

Both exist for real circuit tests: the total key-off draw read with one fuse pulled (common
practice: pull fuses one at a time while the draw is watched), and a sensor signal wire
shorted to the module's 5 V reference rather than to battery voltage.
"""

from __future__ import annotations

from pathlib import Path

import pytest

from assistant.ruleset import fault_list, lint_ruleset, load_ruleset

BASE = """\
format: 1
id: tiny
title: a lamp on a fuse
family: lamp
version: "1"
system_voltage: 12 V
nodes:
  B: {}
  F: {}
  REF: {}
components:
  - {id: bat, type: battery, nodes: [B, GND], emf: 12.6 V}
  - {id: f1, type: fuse, nodes: [B, F], rating: 10 A}
  - id: w1
    type: wire
    nodes: [F, REF]
    length: 1 m
    section: 1 mm2
    faults:
      short_to_power: {weight: 0.5, to: %(to)s}
  - {id: lamp, type: lamp, nodes: [REF, GND], rating: 5 W}
states:
  on: {label: on}
tests:
  - {id: total, kind: current, component: bat, jack: 10A, isolate: [%(isolate)s]}
"""


def _load(tmp_path: Path, to: str = "B", isolate: str = "f1") -> list[str]:
    path = tmp_path / "tiny.yaml"
    path.write_text(BASE % {"to": to, "isolate": isolate}, encoding="utf-8")
    return [p.message for p in lint_ruleset(load_ruleset(path))]


def test_isolate_and_to_lint_clean_and_reach_the_fault_list(tmp_path: Path) -> None:
    assert _load(tmp_path) == []
    loaded = load_ruleset(tmp_path / "tiny.yaml")
    test = loaded.ruleset.tests[0]
    assert test.isolate == ("f1",)
    short = {f.id: f for f in fault_list(loaded.ruleset)}["w1.short_to_power"]
    assert short.to == "B"
    # faults that do not name 'to' keep None: the circuit engine's default (the power node)
    assert {f.id: f for f in fault_list(loaded.ruleset)}["w1.open"].to is None


@pytest.mark.parametrize(
    ("to", "isolate", "message"),
    [
        ("NOWHERE", "f1", "unknown node 'NOWHERE' (not under nodes:)"),
        ("B", "f9", "unknown component 'f9'"),
        ("B", "bat", "'bat' is the component the current is read in; it cannot be isolated too"),
    ],
)
def test_bad_references_are_reported(tmp_path: Path, to: str, isolate: str, message: str) -> None:
    assert _load(tmp_path, to, isolate) == [message]


def test_to_only_on_short_to_power(tmp_path: Path) -> None:
    path = tmp_path / "tiny.yaml"
    text = (BASE % {"to": "B", "isolate": "f1"}).replace("short_to_power: {weight: 0.5, to: B}",
                                                          "open: {weight: 0.5, to: B}")
    path.write_text(text, encoding="utf-8")
    messages = [p.message for p in lint_ruleset(load_ruleset(path))]
    assert messages == ["'to' applies only to short_to_power, not to 'open'"]
