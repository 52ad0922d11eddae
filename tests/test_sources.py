"""Reading sources: answers files (checked, located errors) and the simulator's determinism."""

from __future__ import annotations

import json
from pathlib import Path

import pytest

from assistant.errors import AnswersFileError, SessionError
from assistant.predict import TestInfo as Info
from assistant.ruleset.load import load_ruleset
from assistant.sources import Answer, AnswersFileSource, Skip, describe, load_answers
from tests.conftest import STOP_LAMPS

RULESET = load_ruleset(STOP_LAMPS).ruleset
UNITS = {"voltage": "V", "drop": "V", "resistance": "ohm", "current": "A", "fuse_drop": "V", "observation": ""}
TESTS = tuple(Info(t.id, t.kind, UNITS[t.kind], t.cost, t.state, getattr(t, "outcomes", ()))
              for t in RULESET.tests)

GOOD = """\
complaint: left_dim
technician: Sam Ortega
vehicle: {fleet_number: CV2-07, odometer_km: 181000, model_year: 2021}
fault_codes: []
notes: holder looked green
readings:
  v_left_feed: 12.3 V
  drop_left_ground: 3.1
  r_left_lamp: 0.7 ohm
  look_fuse: "no"
repair: Cleaned the left lamp ground
verification: 40 mV
"""


def write(tmp_path: Path, text: str, name: str = "answers.yaml") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def test_a_good_file(tmp_path: Path) -> None:
    answers = load_answers(write(tmp_path, GOOD), RULESET, TESTS)
    assert answers.intake.complaint == "left_dim" and answers.intake.technician == "Sam Ortega"
    assert answers.intake.vehicle.odometer_km == 181000 and answers.intake.notes == ("holder looked green",)
    assert answers.readings["v_left_feed"].value == 12.3
    assert answers.readings["drop_left_ground"].value == 3.1  # a bare number is in the test's unit
    assert answers.readings["look_fuse"].outcome == "no"
    assert answers.repair == "Cleaned the left lamp ground" and answers.verification == "40 mV"


def test_json_works_the_same(tmp_path: Path) -> None:
    data = {"complaint": "left_out", "readings": {"r_left_lamp": "OL", "v_left_feed": 12.4}}
    answers = load_answers(write(tmp_path, json.dumps(data), "answers.json"), RULESET, TESTS)
    assert answers.readings["r_left_lamp"].overload and answers.readings["v_left_feed"].value == 12.4


@pytest.mark.parametrize(
    ("text", "line", "says"),
    [
        ("readings:\n  v_left_feed: 12.3\n  v_nowhere: 12\n", 3, "unknown test 'v_nowhere' for ruleset stop_lamps"),
        ("readings:\n  v_left_feed: 12 ohm\n", 2, "v_left_feed: '12 ohm' is not a voltage"),
        ("readings:\n  look_fuse: maybe\n", 2, "look_fuse: 'maybe' is not an answer"),
        ("readings:\n  look_fuse: true\n", 2, "must be a number or a text"),
        ("complaint: smoke\n", 1, "unknown complaint 'smoke'"),
        ("colour: red\n", 1, "unknown field 'colour'"),
        ("vehicle:\n  wheels: 4\n", 2, "vehicle.wheels: unknown field"),
        ("vehicle:\n  model_year: soon\n", 2, "vehicle.model_year"),
        ("readings: [1, 2]\n", 1, "readings map test ids to readings"),
        ("readings:\n  v_fuse: 1\n  v_fuse: 2\n", 3, "duplicate key"),
        ("readings: {v_fuse: 12\n", None, "YAML"),
        ("- just\n- a list\n", 1, "an answers file is a mapping"),
    ],
)
def test_bad_files_are_located(tmp_path: Path, text: str, line: int | None, says: str) -> None:
    path = write(tmp_path, text)
    with pytest.raises(AnswersFileError) as caught:
        load_answers(path, RULESET, TESTS)
    error = caught.value
    assert says in str(error) and "\n" not in str(error)
    assert error.file == str(path)
    if line is not None:
        assert error.line == line
        assert str(error).startswith(f"{path}:{line}:")


@pytest.mark.parametrize("content", [b"", b"\x00\x01binary", b"\xff\xfe not utf-8"])
def test_unreadable_files(tmp_path: Path, content: bytes) -> None:
    path = tmp_path / "answers.yaml"
    path.write_bytes(content)
    with pytest.raises(AnswersFileError):
        load_answers(path, RULESET, TESTS)


def test_missing_file(tmp_path: Path) -> None:
    with pytest.raises(AnswersFileError, match="no such file"):
        load_answers(tmp_path / "nope.yaml", RULESET, TESTS)


def test_answers_once_each_and_skips_the_rest(tmp_path: Path) -> None:
    source = AnswersFileSource(load_answers(write(tmp_path, GOOD), RULESET, TESTS))

    class Q:  # only the test is looked at
        def __init__(self, test: Info) -> None:
            self.test = test

    by_id = {t.id: t for t in TESTS}
    first = source.ask(Q(by_id["v_left_feed"]))  # type: ignore[arg-type]
    assert isinstance(first, Answer) and first.reading is not None and first.reading.value == 12.3
    assert isinstance(source.ask(Q(by_id["v_left_feed"])), Skip)  # asked again: the file has one reading
    assert isinstance(source.ask(Q(by_id["v_fuse"])), Skip)  # not in the file
    assert describe(first) == "12.3 V" and source.label == f"answers {tmp_path / 'answers.yaml'}"


def test_simulator_refuses_an_unknown_fault() -> None:
    from assistant.predict import predict
    from assistant.sources import SimulatedSource

    table = predict(load_ruleset(STOP_LAMPS))
    with pytest.raises(SessionError, match="unknown fault 'lamp_left.melted'"):
        SimulatedSource(table, "lamp_left.melted")
