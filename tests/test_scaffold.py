"""`ohmtrail new`: every family's starting ruleset lints clean, has one case and is never written over."""

from __future__ import annotations

from pathlib import Path

import pytest

from assistant.cli import main
from assistant.errors import OhmtrailError, OutputError
from assistant.ruleset import lint_ruleset, load_ruleset
from assistant.scaffold import FAMILIES, scaffold_text, template_text, write_scaffold


@pytest.mark.parametrize("family", FAMILIES)
def test_each_family_lints_clean_with_one_case(family: str, tmp_path: Path) -> None:
    path = write_scaffold(family, f"fleet_{family}", tmp_path / f"{family}.yaml")
    loaded = load_ruleset(path)
    assert lint_ruleset(loaded) == []
    assert loaded.ruleset.id == f"fleet_{family}"
    assert loaded.ruleset.family == family
    assert len(loaded.ruleset.cases) == 1
    assert loaded.ruleset.cautions, "a starting ruleset carries the cautions of its family"
    # only the id line differs from the shipped template: the comments are the author's guide
    ours = path.read_text(encoding="utf-8").splitlines()
    shipped = template_text(family).splitlines()
    assert [i for i, (a, b) in enumerate(zip(ours, shipped)) if a != b] == [
        next(i for i, line in enumerate(shipped) if line.startswith("id: "))]
    assert sum(line.lstrip().startswith("#") for line in ours) >= 5


def test_new_lamp_then_lint_exits_0(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                    capsys: pytest.CaptureFixture[str]) -> None:
    monkeypatch.chdir(tmp_path)
    assert main(["new", "lamp", "x"]) == 0
    assert main(["lint", "x.yaml"]) == 0
    assert "ok: 1 ruleset checked" in capsys.readouterr().out


def test_an_existing_file_is_never_overwritten(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                                capsys: pytest.CaptureFixture[str]) -> None:
    monkeypatch.chdir(tmp_path)
    Path("x.yaml").write_text("my own work\n", encoding="utf-8")
    assert main(["new", "motor", "x"]) == 1
    assert Path("x.yaml").read_text(encoding="utf-8") == "my own work\n"
    err = capsys.readouterr().err
    assert err.count("\n") == 1 and "already exists; not overwritten" in err
    with pytest.raises(OutputError):
        write_scaffold("lamp", "x", tmp_path / "x.yaml")


@pytest.mark.parametrize("name", ["9lives", "has space", "dot.ted", "", "a" * 65])
def test_names_that_cannot_be_ids_are_refused(name: str) -> None:
    with pytest.raises(OhmtrailError, match="cannot be a ruleset id"):
        scaffold_text("lamp", name)


def test_unknown_family_is_refused() -> None:
    with pytest.raises(OhmtrailError, match="unknown family 'boat'"):
        template_text("boat")
