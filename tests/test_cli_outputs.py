"""The trail, report, export and verify commands: files written, exit codes, one-line errors.

The session is demo data (tests/data/stop_lamp_session.json), put into a SQLite store in a
temporary folder.
"""

from __future__ import annotations

import json
import shutil
from pathlib import Path

import pytest

from assistant.cli import main
from assistant.export import export_json
from assistant.record import SessionRecord

DATA = Path(__file__).parent / "data"


def load_session() -> SessionRecord:
    return SessionRecord.model_validate_json((DATA / "stop_lamp_session.json").read_text("utf-8"))


@pytest.fixture
def export_file(tmp_path: Path) -> Path:
    path = tmp_path / "session.json"
    path.write_text(export_json(load_session()), encoding="utf-8")
    return path


def test_verify_says_intact_and_exits_zero(export_file: Path,
                                           capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["verify", str(export_file)]) == 0
    out = capsys.readouterr().out
    assert "intact: 15 steps" in out


def test_verify_names_the_step_whose_reading_changed(export_file: Path,
                                                     capsys: pytest.CaptureFixture[str]) -> None:
    data = json.loads(export_file.read_text("utf-8"))
    data["steps"][10]["reading"] = 0.305
    export_file.write_text(json.dumps(data), encoding="utf-8")
    assert main(["verify", str(export_file)]) == 1
    err = capsys.readouterr().err
    assert "steps[10]: step 10 (reading drop_left_ground" in err
    assert len(err.strip().splitlines()) == 1


@pytest.mark.parametrize(("content", "message"), [
    (None, "cannot read"),
    ("{not json", "not JSON"),
    ("[1, 2]", "not an ohmtrail session export"),
])
def test_verify_of_a_bad_file_is_one_line(tmp_path: Path, content: str | None, message: str,
                                          capsys: pytest.CaptureFixture[str]) -> None:
    path = tmp_path / "x.json"
    if content is not None:
        path.write_text(content, encoding="utf-8")
    assert main(["verify", str(path)]) == 1
    err = capsys.readouterr().err.strip()
    assert message in err and len(err.splitlines()) == 1


@pytest.fixture
def store_url(tmp_path: Path) -> str:
    store = pytest.importorskip("assistant.store")
    url = f"sqlite:///{tmp_path / 'sessions.db'}"
    record = load_session()
    opened = store.open_store(url)
    opened.create(record.model_copy(update={"steps": ()}))
    for step in record.steps:
        opened.append(record.id, step)
    opened.update(record.id, **{k: getattr(record, k) for k in (
        "finished", "status", "diagnosis", "probability", "alternatives", "stopped_because",
        "repair", "verification", "cautions")})
    return url


def test_export_from_the_store_verifies(store_url: str, tmp_path: Path,
                                        capsys: pytest.CaptureFixture[str]) -> None:
    out = tmp_path / "e.json"
    assert main(["export", load_session().id, "--db", store_url, "-o", str(out)]) == 0
    assert main(["verify", str(out)]) == 0
    assert json.loads(out.read_text("utf-8"))["integrity"]["digest"] in capsys.readouterr().out


@pytest.mark.parametrize("fmt", ["svg", "pdf", "png", "dot"])
def test_trail_writes_each_format(store_url: str, tmp_path: Path, fmt: str) -> None:
    if fmt != "dot" and shutil.which("dot") is None:
        pytest.skip("graphviz dot not installed")
    out = tmp_path / f"t.{fmt}"
    assert main(["trail", load_session().id, "--db", store_url, "--format", fmt,
                 "-o", str(out)]) == 0
    assert out.stat().st_size > 0


def test_trail_without_dot_writes_the_source_and_a_hint(
        store_url: str, tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
        capsys: pytest.CaptureFixture[str]) -> None:
    monkeypatch.setenv("PATH", str(tmp_path))
    assert main(["trail", load_session().id, "--db", store_url, "-o",
                 str(tmp_path / "t.svg")]) == 1
    assert (tmp_path / "t.dot").read_text("utf-8").startswith("digraph trail")
    err = capsys.readouterr().err.strip()
    assert "install graphviz" in err and len(err.splitlines()) == 1


@pytest.mark.parametrize("fmt", ["pdf", "html"])
def test_report_writes_each_format(store_url: str, tmp_path: Path, fmt: str,
                                   monkeypatch: pytest.MonkeyPatch,
                                   capsys: pytest.CaptureFixture[str]) -> None:
    monkeypatch.chdir(tmp_path)
    assert main(["report", load_session().id, "--db", store_url, "--format", fmt]) == 0
    written = Path(capsys.readouterr().out.strip())
    assert written.name == f"{load_session().id}-report.{fmt}" and written.stat().st_size > 0


def test_an_unwritable_output_is_one_line(store_url: str, tmp_path: Path,
                                          capsys: pytest.CaptureFixture[str]) -> None:
    blocker = tmp_path / "a-file"
    blocker.write_text("x")
    assert main(["report", load_session().id, "--db", store_url, "-o",
                 str(blocker / "r.pdf")]) == 1
    err = capsys.readouterr().err.strip()
    assert "cannot write" in err and len(err.splitlines()) == 1


def test_an_unknown_session_is_one_line(store_url: str, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["report", "no-such-session", "--db", store_url]) == 1
    err = capsys.readouterr().err.strip()
    assert err.startswith("ohmtrail: ") and len(err.splitlines()) == 1
