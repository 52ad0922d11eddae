"""Prints the linear walk's voltage path of a ruleset (run in a child process by test_baselines)."""

from __future__ import annotations

import sys
from pathlib import Path

from synthetic_tables import flat_table

from assistant.baselines import voltage_path
from assistant.ruleset import load_ruleset

loaded = load_ruleset(Path(sys.argv[1]))
table = flat_table(loaded)
print([table.tests[i].id for i in voltage_path(loaded.ruleset, table)])
