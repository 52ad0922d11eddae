"""The exported names of the public packages are a promise; changing them is a decision."""

from __future__ import annotations

import assistant.ruleset


def test_ruleset_package_exports() -> None:
    assert sorted(assistant.ruleset.__all__) == [
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
    for name in assistant.ruleset.__all__:
        assert getattr(assistant.ruleset, name) is not None
