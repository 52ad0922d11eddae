"""`ohmtrail learn` end to end: the overlay it writes, what it prints, and bad input."""

from __future__ import annotations

import shutil
from pathlib import Path

import pytest

from assistant.cli import main
from assistant.history import HEADER
from assistant.ruleset import fault_list, load_ruleset

STOP_LAMPS = Path("rulesets/lamp/stop_lamps.yaml")


@pytest.fixture()
def ruleset(tmp_path: Path) -> Path:
    target = tmp_path / "rulesets" / "lamp" / "stop_lamps.yaml"
    target.parent.mkdir(parents=True)
    shutil.copy(STOP_LAMPS, target)
    return target


def _history(tmp_path: Path, rows: list[str]) -> Path:
    path = tmp_path / "repairs.csv"
    path.write_text(HEADER + "\n" + "\n".join(rows) + "\n", encoding="utf-8")
    return path


def _prior(path: Path, fault: str, **kw: object) -> float:
    rs = load_ruleset(path, **kw).ruleset  # type: ignore[arg-type]
    total = rs.none_weight + sum(f.weight for f in fault_list(rs))
    return next(f.weight for f in fault_list(rs) if f.id == fault) / total


def test_thirty_repairs_raise_that_faults_prior(ruleset: Path, tmp_path: Path,
                                                capsys: pytest.CaptureFixture[str]) -> None:
    rows = [f"2026-{1 + i % 12:02d}-{1 + i % 28:02d},CV2-{i:03d},stop_lamps,,g_rear,high_resistance,"
            for i in range(30)]
    rows.append("2026-06-01,CV2-100,stop_lamps,g_raer.high_resistance,,,")  # a typo: listed, not fatal
    before_bytes = ruleset.read_bytes()
    before = _prior(ruleset, "g_rear.high_resistance")
    assert main(["learn", str(ruleset), "--history", str(_history(tmp_path, rows))]) == 0
    out = capsys.readouterr().out
    assert "not counted:" in out and "g_raer.high_resistance (unknown fault)" in out
    assert "30 repairs counted" in out
    line = next(ln for ln in out.splitlines() if ln.startswith("g_rear.high_resistance "))
    faults = fault_list(load_ruleset(ruleset).ruleset)
    total, k = sum(f.weight for f in faults), len(faults)
    # closed form of the posterior mean (Murphy 2012, section 3.4), strength k pseudo-repairs:
    # W * (k * 2.5 / W + 30) / (k + 30) = (k * 2.5 + 30 * W) / (k + 30)
    expected = (k * 2.5 + 30 * total) / (k + 30)
    assert line.split()[1:4] == ["30", "2.5", f"{expected:.4g}"]
    overlay = ruleset.with_name("stop_lamps.overlay.yaml")
    assert overlay.is_file() and f"overlay written to {overlay}" in out
    after = _prior(ruleset, "g_rear.high_resistance")  # the overlay beside it is applied on load
    assert after > 3 * before
    assert _prior(ruleset, "g_rear.high_resistance", beside=False) == pytest.approx(before)
    assert ruleset.read_bytes() == before_bytes  # the ruleset file is never rewritten


def test_learning_again_starts_from_the_ruleset_not_the_old_overlay(ruleset: Path, tmp_path: Path) -> None:
    history = _history(tmp_path, ["2026-01-01,CV2-1,stop_lamps,f12.blown,,,"] * 5)
    assert main(["learn", str(ruleset), "--history", str(history)]) == 0
    first = ruleset.with_name("stop_lamps.overlay.yaml").read_text(encoding="utf-8")
    assert main(["learn", str(ruleset), "--history", str(history)]) == 0
    assert ruleset.with_name("stop_lamps.overlay.yaml").read_text(encoding="utf-8") == first


@pytest.mark.parametrize("rows, needle", [
    (["2026-13-01,CV2-1,stop_lamps,f12.blown,,,"], "repairs.csv:2:1: '2026-13-01' is not a date"),
    (["2026-01-01,CV2-1,stop_lamp,f12.blown,,,"], "repairs.csv:2:3: unknown ruleset 'stop_lamp'"),
    (["2026-01-01,CV2-1,stop_lamps,f12.blwn,,,"], "no repairs of ruleset 'stop_lamps' to learn from"),
])
def test_bad_history_is_one_line_and_writes_nothing(ruleset: Path, tmp_path: Path, rows: list[str],
                                                     needle: str, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["learn", str(ruleset), "--history", str(_history(tmp_path, rows))]) == 1
    err = capsys.readouterr().err
    assert needle in err and err.count("\n") == 1
    assert not ruleset.with_name("stop_lamps.overlay.yaml").exists()


def test_rows_of_other_rulesets_in_the_tree_are_skipped(ruleset: Path, tmp_path: Path) -> None:
    other = ruleset.parent.parent / "starter" / "crank.yaml"
    other.parent.mkdir()
    other.write_text(STOP_LAMPS.read_text(encoding="utf-8").replace("id: stop_lamps", "id: crank"), encoding="utf-8")
    history = _history(tmp_path, ["2026-01-01,CV2-1,crank,battery.failing,,,",
                                  "2026-01-02,CV2-2,stop_lamps,battery.failing,,,"])
    assert main(["learn", str(ruleset), "--history", str(history)]) == 0


def test_never_writes_over_the_ruleset(ruleset: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    history = _history(tmp_path, ["2026-01-01,CV2-1,stop_lamps,f12.blown,,,"])
    before = ruleset.read_bytes()
    assert main(["learn", str(ruleset), "--history", str(history), "-o", str(ruleset)]) == 1
    assert "never over it" in capsys.readouterr().err
    assert ruleset.read_bytes() == before


def test_learn_needs_a_source(ruleset: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["learn", str(ruleset)]) == 1
    assert "needs --history FILE" in capsys.readouterr().err


def test_closed_sessions_of_the_store_count(ruleset: Path, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    from assistant.record import SessionRecord
    from assistant.store import open_store

    url = f"sqlite:///{tmp_path / 'sessions.db'}"
    with open_store(url) as db:
        for i in range(3):
            db.create(SessionRecord(id=f"s{i}", ruleset_id="stop_lamps", ruleset_version="1.0.0",
                                    ruleset_sha256="0" * 64, started="2026-05-01T08:00:00Z", status="closed",
                                    diagnosis="c40.high_resistance", repair="Cleaned C40"))
    assert main(["learn", str(ruleset), "--db", url]) == 0
    out = capsys.readouterr().out
    assert "3 repairs counted" in out
    assert next(ln for ln in out.splitlines() if ln.startswith("c40.high_resistance ")).split()[1] == "3"


def test_simulate_and_predict_take_the_overlay(tmp_path: Path, monkeypatch: pytest.MonkeyPatch,
                                               capsys: pytest.CaptureFixture[str]) -> None:
    import json

    from assistant.scaffold import write_scaffold

    monkeypatch.setenv("OHMTRAIL_CACHE", str(tmp_path / "cache"))
    lamp = write_scaffold("lamp", "plate", tmp_path / "plate.yaml")
    overlay = tmp_path / "o.yaml"
    overlay.write_text("overlay: 1\nruleset: plate\nweights:\n  g_point.high_resistance: 40\n", encoding="utf-8")

    def prior(argv: list[str]) -> float:
        assert main(argv) == 0
        data = json.loads(capsys.readouterr().out)
        return next(p["prior"] for p in data["per_hypothesis"] if p["hypothesis"] == "g_point.high_resistance")

    plain = prior(["simulate", str(lamp), "--trials", "1", "--json"])
    learned = prior(["simulate", str(lamp), "--trials", "1", "--json", "--overlay", str(overlay)])
    rs = load_ruleset(lamp).ruleset
    total = rs.none_weight + sum(f.weight for f in fault_list(rs))
    assert plain == pytest.approx(2.0 / total)  # the ground type's default weight
    assert learned == pytest.approx(40.0 / (total - 2.0 + 40.0))
    assert main(["predict", str(lamp), "--json", "--overlay", str(tmp_path / "missing.yaml")]) == 1
    assert "missing.yaml: no such file" in capsys.readouterr().err
