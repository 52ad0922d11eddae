"""`ohmtrail check`: a ruleset's cases run through the circuit and diagnosis engines."""

from __future__ import annotations

import re
from collections.abc import Iterator
from pathlib import Path

import pytest

from assistant.cases import check_paths, run_cases
from assistant.cli import main
from assistant.predict import predict
from assistant.ruleset import load_ruleset
from assistant.scaffold import FAMILIES, write_scaffold


@pytest.fixture(scope="module", autouse=True)
def _own_cache(tmp_path_factory: pytest.TempPathFactory) -> Iterator[None]:
    # predictions are cached on disk; keep this module's out of the user's cache
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("OHMTRAIL_CACHE", str(tmp_path_factory.mktemp("cache")))
        yield


@pytest.fixture(scope="module")
def lamp(tmp_path_factory: pytest.TempPathFactory) -> Path:
    return write_scaffold("lamp", "plate_lamp", tmp_path_factory.mktemp("lamp") / "plate_lamp.yaml")


def _variant(path: Path, old: str, new: str) -> Path:
    text = path.read_text(encoding="utf-8")
    assert old in text, f"{old!r} not in {path}"
    target = path.with_name(f"variant_{abs(hash(new)) % 10**6}.yaml")
    target.write_text(text.replace(old, new, 1), encoding="utf-8")
    return target


CASE = '''  - id: lamp_blown
    complaint: lamp_out
    readings: {look_fuse: "no", v_lamp_feed: 12.6 V, drop_ground: 0.00 V, r_lamp: OL}   # no current flows: no drops
    expect: lamp.filament_open'''


@pytest.mark.parametrize("family", FAMILIES)
def test_every_starting_ruleset_passes_its_own_case(family: str, tmp_path: Path) -> None:
    path = write_scaffold(family, f"t_{family}", tmp_path / f"{family}.yaml")
    report = check_paths([path])
    assert report.problems == ()
    assert [(r.case_id, r.passed) for r in report.results] == [(load_ruleset(path).ruleset.cases[0].id, True)]
    assert report.ok


def test_a_passing_case_answers_what_is_asked_and_skips_the_rest(lamp: Path) -> None:
    loaded = load_ruleset(lamp)
    (result,) = run_cases(loaded, predict(loaded))
    assert result.passed and result.diagnosis == "lamp.filament_open" and result.probability >= 0.95
    assert set(result.asked) <= {"look_fuse", "v_lamp_feed", "drop_ground", "r_lamp"}
    assert result.minutes == sum(t.cost for t in loaded.ruleset.tests if t.id in result.asked)
    assert not set(result.skipped) & set(result.asked)


def test_a_case_expecting_the_wrong_fault_fails_with_the_difference(lamp: Path,
                                                                    capsys: pytest.CaptureFixture[str]) -> None:
    wrong = _variant(lamp, "expect: lamp.filament_open", "expect: w_feed.open")
    assert main(["check", str(wrong)]) == 1
    out = capsys.readouterr()
    assert "FAIL  plate_lamp: lamp_blown" in out.out
    assert "expected w_feed.open, got lamp.filament_open" in out.out
    assert "1 case in 1 ruleset: 0 passed, 1 failed" in out.err
    assert main(["check", str(lamp)]) == 0
    assert "PASS  plate_lamp: lamp_blown  (lamp.filament_open" in capsys.readouterr().out


def test_order_and_max_tests_are_checked(lamp: Path) -> None:
    loaded = load_ruleset(lamp)
    (asked,) = [r.asked for r in run_cases(loaded, predict(loaded))]
    assert len(asked) >= 2
    strict = _variant(lamp, CASE, CASE + f"\n    order: [{asked[1]}, {asked[0]}]\n    max_tests: 1")
    (result,) = check_paths([strict]).results
    assert not result.passed
    assert result.differences == (
        f"expected the tests to start {asked[1]}, {asked[0]}; asked {asked[0]}, {asked[1]}",
        f"expected at most 1 tests; took {len(asked)} ({', '.join(asked)})",
    )
    right = _variant(lamp, CASE, CASE + f"\n    order: [{asked[0]}]\n    max_tests: {len(asked)}")
    assert check_paths([right]).ok


def test_a_bad_reading_in_a_case_is_located_and_the_others_still_run(lamp: Path) -> None:
    # every meter reading of the first case in the wrong unit: whichever test comes first fails
    bad = CASE.replace("12.6 V", "12.6 ohm").replace("0.00 V", "0.00 ohm").replace("r_lamp: OL", "r_lamp: 5 V")
    two = _variant(lamp, CASE, bad + "\n" + CASE.replace("lamp_blown", "again"))
    first, second = check_paths([two]).results
    assert not first.passed and second.passed
    (difference,) = first.differences
    line = next(i for i, text in enumerate(two.read_text(encoding="utf-8").splitlines(), 1) if "12.6 ohm" in text)
    assert difference.startswith(f"{two}:{line}:")
    assert re.search(r"reading '(12.6 ohm|0.00 ohm|5 V)' for (v_lamp_feed|drop_ground|r_lamp)", difference)


def test_rulesets_that_cannot_run_are_problems_not_tracebacks(lamp: Path, tmp_path: Path,
                                                              capsys: pytest.CaptureFixture[str]) -> None:
    broken = _variant(lamp, "expect: lamp.filament_open", "expect: lamp.seized")
    assert main(["check", str(broken), str(tmp_path / "missing.yaml")]) == 1
    err = capsys.readouterr().err
    assert "cannot have fault mode" in err or "unknown fault 'lamp.seized'" in err
    assert "missing.yaml: no such file" in err
    assert "2 ruleset problems" in err


def test_a_folder_without_rulesets_is_an_error(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    assert main(["check", str(tmp_path)]) == 1
    assert capsys.readouterr().err == f"ohmtrail: no ruleset files (*.yaml) under {tmp_path}\n"
