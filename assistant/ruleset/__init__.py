"""The ruleset format: models, quantities, loading with positions, and lint."""

from __future__ import annotations

from assistant.ruleset.defaults import Fault, fault_list
from assistant.ruleset.lint import LintResult, check_ruleset, lint_paths, lint_ruleset
from assistant.ruleset.load import LoadedRuleset, load_ruleset, ruleset_files
from assistant.ruleset.model import FORMAT_VERSION, Ruleset

__all__ = [
    "FORMAT_VERSION",
    "Fault",
    "LintResult",
    "LoadedRuleset",
    "Ruleset",
    "check_ruleset",
    "fault_list",
    "lint_paths",
    "lint_ruleset",
    "load_ruleset",
    "ruleset_files",
]
