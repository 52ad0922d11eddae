"""The command line: one-line errors with places, exit codes, and the schema export."""

from __future__ import annotations

import json
import os
import subprocess
import sys
from collections.abc import Callable
from pathlib import Path

import pytest

from assistant.cli import main
from tests.conftest import ROOT, RULESETS


def _run(*args: str) -> subprocess.CompletedProcess[str]:
    env = dict(os.environ, PYTHONPATH=str(ROOT))
    return subprocess.run([sys.executable, "-m", "assistant.cli", *args], capture_output=True, text=True,
                          env=env, cwd=ROOT, timeout=120)


def test_lint_bundled_exits_zero(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["lint", str(RULESETS)]) == 0
    assert capsys.readouterr().out.startswith("ok: ")


@pytest.mark.parametrize(
    ("old", "new"),
    [
        ("    internal_resistance: 0.01 ohm", "    internal_resistance: 0.01 ohm\n    internal_resistance: 0.02 ohm"),  # duplicated key
        ("    rating: 10 A ", "    rating: ten A "),  # a number replaced by a word
        ("    nodes: [F12_OUT, SW_IN]", "    nodes: [F12_OUT, SW_IN"),  # broken YAML
    ],
)
def test_lint_bad_copy_prints_places_and_no_traceback(write_copy: Callable[..., Path], old: str, new: str) -> None:
    path = write_copy(old, new)
    proc = _run("lint", str(path))
    assert proc.returncode == 1
    assert "Traceback" not in proc.stderr + proc.stdout
    first = proc.stderr.splitlines()[0]
    file_part, line, col, _ = first.split(":", 3)
    assert file_part == str(path) and line.isdigit() and col.isdigit()


def test_lint_missing_path(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["lint", str(tmp_path / "nope.yaml")]) == 1
    assert "no such file" in capsys.readouterr().err


def test_lint_empty_folder_is_not_success(tmp_path: Path) -> None:
    assert main(["lint", str(tmp_path)]) == 1


def test_schema_is_json_schema(capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["schema"]) == 0
    schema = json.loads(capsys.readouterr().out)
    assert schema["type"] == "object"
    assert {"components", "tests", "states", "nodes"} <= set(schema["properties"])
    assert "Lamp" in schema["$defs"] and "ObservationTest" in schema["$defs"]
    # quantities accept numbers and texts
    assert schema["$defs"]["Lamp"]["properties"]["rating"]["anyOf"] == [{"type": "number"}, {"type": "string"}]


def test_schema_through_json_tool() -> None:
    proc = _run("schema")
    assert proc.returncode == 0
    check = subprocess.run([sys.executable, "-m", "json.tool"], input=proc.stdout, capture_output=True, text=True)
    assert check.returncode == 0


def test_no_command_prints_help(capsys: pytest.CaptureFixture[str]) -> None:
    assert main([]) == 2
    assert "lint" in capsys.readouterr().out


@pytest.mark.parametrize("command", [
    ["predict", "rulesets/lamp/stop_lamps.yaml"],
    ["simulate", "rulesets/lamp/stop_lamps.yaml"],
    ["check", "rulesets/lamp"],
    ["coverage", "rulesets/lamp/stop_lamps.yaml"],
    ["diagnose", "rulesets/lamp/stop_lamps.yaml", "--simulate", "lamp_left.filament_open"],
])
def test_a_negative_seed_is_refused_with_a_message(command: list[str], capsys: pytest.CaptureFixture[str]) -> None:
    """A random seed must be a whole number of 0 or more (the generator takes no negative
    seed): the command line says so before any work, as argparse reports a bad option."""
    with pytest.raises(SystemExit) as stop:
        main([*command, "--seed", "-1"])
    assert stop.value.code == 2
    err = capsys.readouterr().err
    assert "argument --seed: '-1' must not be negative" in err and "Traceback" not in err
