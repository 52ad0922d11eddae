"""Acceptance of issues 5 and 7: `ohmtrail diagnose RULESET --simulate F --json` names F, or a group
holding F, for every hypothesis `ohmtrail predict` lists (``none`` included), for every bundled ruleset.

Each session runs through the library as the command runs it (``Engine.build``,
``SimulatedSource`` on the vehicles of ``vehicle_table``, ``Session.run``, ``summary_json``) on
one store, with seed 0, so that the whole matrix stays fast; one session per ruleset also goes
through ``assistant.cli.main`` itself.
A group conclusion must reach the threshold with the true fault inside it, and say so in the
JSON: ``diagnosis`` (its most probable member), ``probability``, ``ambiguity_group``,
``group_probability``.
"""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from assistant.cli import main
from assistant.ruleset.load import load_ruleset
from assistant.session import Engine, Session, summary_json
from assistant.simulate import vehicle_table
from assistant.sources import SimulatedSource
from assistant.store import open_store

RULESETS = sorted((Path(__file__).resolve().parent.parent / "rulesets").glob("*/*.yaml"))

# Faults still not named at seed 0, each with what the session concludes instead. Open defects,
# listed so that a new miss fails this test and a fixed one must be taken off the list.
KNOWN_MISSES: dict[str, dict[str, str]] = {}


def _named(data: dict[str, object], fault: str) -> bool:
    group = data["ambiguity_group"]
    assert isinstance(group, list)
    return data["diagnosis"] == fault or fault in group


@pytest.mark.slow
@pytest.mark.parametrize("path", RULESETS, ids=[p.stem for p in RULESETS])
def test_every_fault_of_the_ruleset_is_named_or_in_the_named_group(
        path: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    loaded = load_ruleset(path)
    engine = Engine.build(loaded)
    vehicles = vehicle_table(loaded)  # as the command draws them: not the engine's own samples
    threshold = loaded.ruleset.threshold
    db = f"sqlite:///{tmp_path / 'sessions.db'}"
    missed: dict[str, object] = {}
    groups: list[str] = []
    with open_store(db) as store:
        for hypothesis in engine.table.hypotheses:
            source = SimulatedSource(vehicles, hypothesis.id, seed=0)
            record = Session.begin(store, engine, source, session_id=hypothesis.id).run(source)
            data = summary_json(record)
            assert data["diagnosis"] is not None, f"{hypothesis.id}: {data['stopped_because']}"
            assert isinstance(data["probability"], float)
            if not _named(data, hypothesis.id):
                missed[hypothesis.id] = data["diagnosis"]
                continue
            group = data["ambiguity_group"]
            if group:  # a group: the diagnosis is its most probable member, and together they reach the threshold
                groups.append(hypothesis.id)
                assert group[0] == data["diagnosis"] and len(group) > 1
                assert data["group_probability"] is not None and data["group_probability"] >= threshold - 1e-9
                assert data["group_probability"] >= data["probability"]
            else:
                assert data["probability"] >= threshold - 1e-9
    assert missed == KNOWN_MISSES.get(path.stem, {})

    # the command itself, in process, on one fault of the ruleset (a group case where there is one)
    fault = groups[0] if groups else engine.table.hypotheses[-1].id
    assert main(["diagnose", str(path), "--simulate", fault, "--json", "--db", db, "--id", f"cli-{fault}"]) == 0
    printed = json.loads(capsys.readouterr().out)
    assert {"session", "ruleset", "diagnosis", "probability", "ambiguity_group", "steps",
            "stopped_because"} <= set(printed)
    assert _named(printed, fault)
    assert main(["sessions", "--json", "--db", db]) == 0
    listed = json.loads(capsys.readouterr().out)
    assert len(listed) == len(engine.table.hypotheses) + 1
    assert all(any(step["kind"] == "reading" for step in s["steps"]) for s in listed)
