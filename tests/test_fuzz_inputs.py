"""Fuzzing what a person types or hands in: readings, answers files, history CSV, exports.

Each property runs the contract of tests/fuzz_targets.py on hypothesis-made inputs: accepted
soundly, or refused with one readable line (located where there is a file); never another
exception. `make fuzz` runs the same with a large budget; docs/reliability.md has the counts.
"""

from __future__ import annotations

import json
import math
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from assistant.errors import HistoryError, ReadingError
from assistant.export import verify_export
from assistant.history import read_history
from assistant.reading import parse_reading
from tests.fuzz_targets import (
    AMPS,
    OHMS,
    VOLTS,
    answers_base,
    check_answers,
    check_export,
    check_history,
    check_reading,
    export_base,
    mutated_answers,
    mutated_history,
    tampered_export,
    typed_reading,
)

FAST = settings(max_examples=300, deadline=None)
FILES = settings(max_examples=40, deadline=None, suppress_health_check=[HealthCheck.too_slow,
                                                                       HealthCheck.data_too_large])


@FAST
@given(case=typed_reading())
def test_any_typed_text_is_a_reading_or_a_one_line_refusal(case: tuple) -> None:
    assert check_reading(case) in ("accepted", "refused")


@pytest.mark.parametrize(
    ("test", "typed", "fragment"),
    [
        # Found by fuzzing: pint's parser raised tokenize.TokenError on "V)", a traceback at the prompt.
        (VOLTS, "12.6 V)", "is not a voltage"),
        (OHMS, "1.7976931348623157e+308 V)", "is not a resistance"),
        # Found by fuzzing: a pasted kilobyte came back whole in the one-line message ...
        (VOLTS, "12.6 " + "x" * 3000, "...'"),
        # ... and an escape sequence typed at the prompt would have reached the terminal in it.
        (VOLTS, "\x1b[2J12", "\\x1b[2J12"),
    ],
)
def test_fuzz_findings_in_readings(test: object, typed: str, fragment: str) -> None:
    with pytest.raises(ReadingError) as info:
        parse_reading(typed, test)  # type: ignore[arg-type]
    message = str(info.value)
    assert fragment in message
    assert len(message) < 300 and "\x1b" not in message and "\n" not in message


def test_fuzz_findings_in_exports() -> None:
    # Found by fuzzing: a NaN put into an export made verify_export raise instead of failing.
    doc = json.loads(export_base())
    index = next(n for n, s in enumerate(doc["steps"]) if s.get("reading") is not None)
    doc["steps"][index]["reading"] = float("nan")
    result = verify_export(doc)
    assert not result.intact and result.step_index == index
    # ... and a member name with a line break made `ohmtrail verify` print two lines.
    doc = json.loads(export_base())
    doc["steps"][0]["evil\nline"] = 1
    result = verify_export(doc)
    assert not result.intact and "\n" not in result.message and "evil\\nline" in result.message


def test_fuzz_findings_in_history(tmp_path: Path) -> None:
    # Found by fuzzing: a quoted cell with a line break came back in a two-line message.
    path = tmp_path / "h.csv"
    path.write_text('date,vehicle,ruleset,fault\n2026-01-02,V1,"stop\nlamps",none\n', encoding="utf-8")
    with pytest.raises(HistoryError) as info:
        read_history(path, {"stop_lamps"})
    assert "\n" not in str(info.value) and "stop\\nlamps" in str(info.value)
    assert info.value.line in (2, 3)  # the row runs from line 2 to line 3


# A reading means what was typed: the value in SI units is the number times the unit's scale.
SCALES = [(VOLTS, "V", 1.0), (VOLTS, "mV", 1e-3), (VOLTS, "kV", 1e3), (OHMS, "ohm", 1.0),
          (OHMS, "kohm", 1e3), (OHMS, "Mohm", 1e6), (OHMS, "mohm", 1e-3), (AMPS, "A", 1.0), (AMPS, "mA", 1e-3)]


@FAST
@given(number=st.floats(-1e6, 1e6, allow_nan=False).map(lambda x: float(f"{x:.6g}")),
       scale=st.sampled_from(SCALES))
def test_a_typed_value_means_the_number_times_its_unit(number: float, scale: tuple) -> None:
    test, unit, factor = scale
    reading = parse_reading(f"{number:g} {unit}", test)
    assert reading.value is not None
    assert math.isclose(reading.value, float(f"{number:g}") * factor, rel_tol=1e-9, abs_tol=1e-15)
    bare = parse_reading(f"{number:g}", test)  # a bare number is in the test's own unit
    assert bare.value is not None and math.isclose(bare.value, float(f"{number:g}"), rel_tol=1e-12)


def test_the_answers_base_is_valid(tmp_path_factory: pytest.TempPathFactory) -> None:
    assert check_answers(answers_base().encode("utf-8"), tmp_path_factory.mktemp("a")) == "accepted"


@FILES
@given(case=mutated_answers())
def test_damaged_answers_files_load_or_are_refused_with_a_place(tmp_path_factory: pytest.TempPathFactory,
                                                                case: tuple) -> None:
    assert check_answers(case[1], tmp_path_factory.mktemp("answers")) in ("accepted", "refused")


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow,
                                                                  HealthCheck.data_too_large])
@given(case=mutated_history())
def test_damaged_history_files_load_or_are_refused_with_a_row(tmp_path_factory: pytest.TempPathFactory,
                                                              case: tuple) -> None:
    assert check_history(case[1], tmp_path_factory.mktemp("history")) in ("accepted", "refused")


@FAST
@given(case=tampered_export())
def test_verify_never_raises_and_catches_every_change(case: tuple) -> None:
    assert check_export(case) in ("accepted", "refused")


def test_ohmtrail_verify_exits_1_naming_the_place_for_every_leaf_tampered(
        tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    # The same tampering through the command a claims department runs: exit 1, one line, the place.
    from assistant.cli import main

    original = json.loads(export_base())
    path = tmp_path / "export.json"
    path.write_text(json.dumps(original), encoding="utf-8")
    assert main(["verify", str(path)]) == 0
    assert "intact" in capsys.readouterr().out
    leaves: list[tuple] = []

    def walk(value: object, where: tuple) -> None:
        if isinstance(value, dict):
            for k, v in value.items():
                walk(v, where + (k,))
        elif isinstance(value, list) and value:
            for i, v in enumerate(value):
                walk(v, where + (i,))
        else:
            leaves.append(where)

    walk(original, ())
    for where in leaves:
        doc = json.loads(export_base())
        parent = doc
        for part in where[:-1]:
            parent = parent[part]
        old = parent[where[-1]]
        parent[where[-1]] = (not old if isinstance(old, bool) else old + 1 if isinstance(old, (int, float))
                             else old + "x" if isinstance(old, str) else "x")
        path.write_text(json.dumps(doc), encoding="utf-8")
        assert main(["verify", str(path)]) == 1, where
        err = capsys.readouterr().err.strip()
        assert err.startswith(f"{path}: ") and "\n" not in err, (where, err)
        place = verify_export(doc).place
        assert place and err.startswith(f"{path}: {place}: "), (where, err)
