"""Prints the linear walk's voltage path of a ruleset (run in a child process by test_baselines)."""

from __future__ import annotations

import sys
from pathlib import Path

from synthetic_tables import build_table, hypotheses_of, infos_of

from assistant.baselines import voltage_path
from assistant.ruleset import load_ruleset

loaded = load_ruleset(Path(sys.argv[1]))
infos = infos_of(loaded)
default = {i.id: {o: 1 / len(i.outcomes) for o in i.outcomes} if i.kind == "observation" else (12.0, 0.1)
           for i in infos}
table = build_table(hypotheses_of(loaded), infos, {}, default=default)
print([table.tests[i].id for i in voltage_path(loaded.ruleset, table)])
