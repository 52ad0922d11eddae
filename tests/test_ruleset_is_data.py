"""Rulesets and records are data: nothing in them reaches eval, exec, a shell or a path outside the output folder.

Two kinds of check: the package's own source holds no call that could run text as code or
as a command (a scan of its syntax trees, so that a later change that adds one fails here),
and hostile text in a ruleset or a session record stays text: ids that look like paths are
refused, and the files written for a session all land in the folder asked for.
"""

from __future__ import annotations

import ast
from pathlib import Path

import pytest

from assistant.errors import RulesetError
from assistant.record import SessionRecord
from assistant.report import write_outputs
from assistant.ruleset import load_ruleset
from tests.conftest import STOP_LAMPS

PACKAGE = Path(__file__).resolve().parent.parent / "assistant"
DATA = Path(__file__).parent / "data"

# Calls that run text as code or as a command, or rebuild objects from bytes.
FORBIDDEN_NAMES = {"eval", "exec", "compile", "__import__"}
FORBIDDEN_ATTRIBUTES = {
    ("os", "system"), ("os", "popen"), ("os", "execv"), ("os", "execvp"), ("os", "spawnv"),
    ("pickle", "load"), ("pickle", "loads"), ("marshal", "loads"), ("importlib", "import_module"),
}
FORBIDDEN_MODULES = {"subprocess", "pickle", "marshal", "shelve"}


def _violations(path: Path) -> list[str]:
    tree = ast.parse(path.read_text(encoding="utf-8"), filename=str(path))
    found = []
    for node in ast.walk(tree):
        where = f"{path.parent.name}/{path.name}:{getattr(node, 'lineno', 0)}"
        if isinstance(node, (ast.Import, ast.ImportFrom)):
            names = [a.name for a in node.names] if isinstance(node, ast.Import) else [node.module or ""]
            found += [f"{where}: imports {n}" for n in names if n.split(".")[0] in FORBIDDEN_MODULES]
        elif isinstance(node, ast.Call):
            func = node.func
            if isinstance(func, ast.Name) and func.id in FORBIDDEN_NAMES:
                found.append(f"{where}: calls {func.id}")
            elif isinstance(func, ast.Attribute) and isinstance(func.value, ast.Name) \
                    and (func.value.id, func.attr) in FORBIDDEN_ATTRIBUTES:
                found.append(f"{where}: calls {func.value.id}.{func.attr}")
            for kw in node.keywords:
                if kw.arg == "shell" and isinstance(kw.value, ast.Constant) and kw.value.value is True:
                    found.append(f"{where}: shell=True")
                if kw.arg == "typ" and isinstance(kw.value, ast.Constant) and kw.value.value in ("unsafe", "full"):
                    found.append(f"{where}: YAML(typ={kw.value.value!r})")
                if kw.arg == "allow_pickle" and isinstance(kw.value, ast.Constant) and kw.value.value is True:
                    found.append(f"{where}: allow_pickle=True")
    return found


def test_the_package_runs_no_text_as_code_or_command() -> None:
    files = sorted(PACKAGE.rglob("*.py"))
    assert len(files) > 20
    problems = [v for f in files for v in _violations(f)]
    assert problems == []


def test_the_scan_finds_what_it_looks_for(tmp_path: Path) -> None:
    # The scanner itself must see each kind of call (a check that cannot fail is no check).
    sample = tmp_path / "sample.py"
    sample.write_text("import subprocess\nimport os\neval('1')\nos.system('x')\n"
                      "subprocess.run('x', shell=True)\n", encoding="utf-8")
    assert len(_violations(sample)) == 4, _violations(sample)


@pytest.mark.parametrize("bad_id", ["../../etc/passwd", "/tmp/x", "a b", "$(id)", "x;rm", "C:\\\\x"])
def test_ids_that_look_like_paths_or_commands_are_refused(tmp_path: Path, bad_id: str) -> None:
    text = STOP_LAMPS.read_text(encoding="utf-8").replace("id: stop_lamps", f"id: '{bad_id}'", 1)
    path = tmp_path / "r.yaml"
    path.write_text(text, encoding="utf-8")
    with pytest.raises(RulesetError) as info:
        load_ruleset(path)
    assert info.value.field == "id" and info.value.line is not None


def test_text_fields_with_commands_stay_text(tmp_path: Path) -> None:
    marker = tmp_path / "ran"
    payload = f"$(touch {marker}) `touch {marker}`; touch {marker} | {{{{7*7}}}} __import__('os')"
    text = STOP_LAMPS.read_text(encoding="utf-8").replace(
        "title: Stop lamps, 12 V, fed through the pedal switch", f"title: \"{payload}\"", 1)
    path = tmp_path / "r.yaml"
    path.write_text(text, encoding="utf-8")
    assert load_ruleset(path).ruleset.title == payload
    assert not marker.exists()


def test_a_session_id_like_a_path_writes_only_into_the_output_folder(tmp_path: Path) -> None:
    record = SessionRecord.model_validate_json((DATA / "stop_lamp_session.json").read_text("utf-8"))
    record = record.model_copy(update={"id": "../../../escape/../x"})
    out = tmp_path / "out" / "deep"
    written = write_outputs(record, out)
    assert len(written) == 4
    for path in written:
        assert path.resolve().parent == out.resolve()
    assert sorted(p.name for p in tmp_path.rglob("*") if p.is_file()) == sorted(p.name for p in written)
