"""Fuzz targets beyond the ruleset: typed readings, answers files, history CSV, exports.

Like tests/fuzzing.py: a hypothesis strategy of hostile inputs per target and a ``check_*``
that returns "accepted" or "refused" when the contract holds and raises otherwise. Shared by
tests/test_fuzz_inputs.py (modest budgets) and benchmarks/fuzz_inputs.py (large ones).
"""

from __future__ import annotations

import copy
import json
import math
from functools import lru_cache
from pathlib import Path
from typing import Any

from hypothesis import strategies as st

from assistant.errors import AnswersFileError, HistoryError, ReadingError
from assistant.export import export_session, verify_export
from assistant.history import read_history
from assistant.predict import TestInfo, test_infos
from assistant.reading import Reading, parse_reading
from assistant.record import SessionRecord
from assistant.ruleset import load_ruleset
from assistant.sources import load_answers
from tests.fuzzing import assert_one_line_located, mutate_text

ROOT = Path(__file__).resolve().parent.parent
STOP_LAMPS = ROOT / "rulesets" / "lamp" / "stop_lamps.yaml"
DEMO_SESSION = ROOT / "tests" / "data" / "stop_lamp_session.json"
MAX_MESSAGE = 600  # a one-line message a technician can read, however long the input


def _one_line(message: str) -> None:
    assert message, "empty message"
    assert "\n" not in message and "\r" not in message, f"message over several lines: {message!r}"
    assert len(message) <= MAX_MESSAGE, f"message of {len(message)} characters"


# --------------------------------------------------------------------------- readings

VOLTS = TestInfo("v_test", "voltage", "V", 2.0, None)
OHMS = TestInfo("r_test", "resistance", "ohm", 2.0, None)
AMPS = TestInfo("i_test", "current", "A", 2.0, None)
LOOK = TestInfo("look_test", "observation", "", 1.0, None, ("yes", "no", "unsure"))
READING_TESTS = (VOLTS, OHMS, AMPS, LOOK)

_NUMBERS = ("0", "-0", "12.6", "-0.03", ".5", "5.", "1e3", "1E-3", "1e309", "-1e309", "1e-400", "nan", "inf",
            "-inf", "Infinity", "1_000", "1,5", "1,234.5", "1.2.3", "0x1F", "٣", "１２", "²", "½", "9" * 400,
            "+-1", "--1", "1e", "e1", "", " ")
_UNITS = ("", "V", "v", "mV", "MV", "kV", "uV", "µV", "μV", "ohm", "ohms", "Ω", "kΩ", "kohm", "k ohm", "k",
          "M", "m", "u", "R", "A", "mA", "MA", "amps", "ua", "mohm", "Mohm", "MΩ", "degC", "K", "kg", "V/m",
          "V**2", "V^2", "1/V", "%", "dB", "Hz", "W", "VA", "V V", "lightyear", "e", "..", "()", "V)", "__class__",
          "ohm * ohm / ohm", "V * A / A", "A * s / s", "1e5 V")
_TYPED = ("OL", "ol", "O.L.", "0L", "-OL", "overload", "over range", "6k5", "4R7", "0m5", "1M5", "6k5 ohm",
          "4R7V", "12V5", "y", "Y", "yes", "YES", "n", "no", "u", "un", "maybe", "", " ", "\t", "\x00", "\x1b[2J",
          "\u202e5.21", "12.6 V\n13 V", "12.6\r", "‐12.6", "−12.6", "12.6 V # note", "=12.6", "{0}", "%s")


@st.composite
def typed_reading(draw: st.DrawFn) -> tuple[TestInfo, str]:
    """(test, text) as a technician might type it, or worse."""
    test = draw(st.sampled_from(READING_TESTS))
    text = draw(st.one_of(
        st.sampled_from(_TYPED),
        st.builds(lambda n, sp, u: f"{n}{sp}{u}", st.sampled_from(_NUMBERS), st.sampled_from(("", " ", "  ", "\t")),
                  st.sampled_from(_UNITS)),
        st.builds(lambda x, u: f"{x!r} {u}", st.floats(allow_nan=True, allow_infinity=True),
                  st.sampled_from(_UNITS)),
        st.text(max_size=24),
        st.text(alphabet="0123456789.,eE+-kKmMuRVAΩohl OL", max_size=12),
        st.text(min_size=1000, max_size=3000),
    ))
    return test, text


def check_reading(case: tuple[TestInfo, str]) -> str:
    """A Reading that fits the test, or a ReadingError on one readable line; nothing else."""
    test, text = case
    try:
        reading = parse_reading(text, test)
    except ReadingError as err:
        _one_line(str(err))
        return "refused"
    assert isinstance(reading, Reading)
    if test.kind == "observation":
        assert reading.outcome in test.outcomes, f"{text!r} gave {reading!r}"
    else:
        assert reading.outcome is None
        assert reading.overload or (reading.value is not None and math.isfinite(reading.value)), reading
    return "accepted"


# --------------------------------------------------------------------------- answers files


@lru_cache(maxsize=1)
def _answers_context() -> tuple[Any, tuple[TestInfo, ...]]:
    loaded = load_ruleset(STOP_LAMPS, beside=False)
    return loaded.ruleset, test_infos(loaded.ruleset)


def answers_base() -> str:
    """A valid answers file for the stop-lamp ruleset, every kind of field used."""
    ruleset, tests = _answers_context()
    meter = [t for t in tests if t.unit][:4]
    looks = [t for t in tests if not t.unit][:1]
    lines = [f"complaint: {ruleset.complaints[0].id}", "technician: A. Example",
             "vehicle:", "  vin: LARK0CV2EXAMPLE01", "  odometer_km: 81234", "  model_year: 2021",
             "  fleet_number: CV2-017", "fault_codes: [B1234]", "notes:", "  - left stop lamp dim",
             "readings:"]
    typed = {"V": "11.8 V", "ohm": "0.7", "A": "1.75 A"}
    lines += [f"  {t.id}: {typed.get(t.unit, 'OL')}" for t in meter]
    lines += [f"  {t.id}: {t.outcomes[0]}" for t in looks]
    lines += ["repair: cleaned the ground eyelet", "verification: 12.4 V", ""]
    return "\n".join(lines)


@st.composite
def mutated_answers(draw: st.DrawFn) -> tuple[str, bytes]:
    kind, data, _expect = mutate_text(draw, answers_base(), extra_values=(
        "v_fuse", "no_such_test", "12.4 V V", "12.4 ohm", "[12.4]", "{a: 1}", "yes", "'OL'")
    )
    return kind, data


def check_answers(data: bytes, folder: Path) -> str:
    """An AnswersFile, or a located AnswersFileError on one line."""
    ruleset, tests = _answers_context()
    path = folder / "answers.yaml"
    path.write_bytes(data)
    try:
        answers = load_answers(path, ruleset, tests)
    except AnswersFileError as err:
        assert_one_line_located(err, str(path), error_type=AnswersFileError)
        assert err.line is not None, f"not located: {err}"
        return "refused"
    known = {t.id for t in tests}
    assert set(answers.readings) <= known
    for reading in answers.readings.values():
        assert reading.overload or reading.outcome is not None or (
            reading.value is not None and math.isfinite(reading.value))
    return "accepted"


# --------------------------------------------------------------------------- history CSV

HISTORY_BASE = (
    "date,vehicle,ruleset,fault,component,mode,odometer_km\n"
    "2026-03-14,CV2-017,stop_lamps,lamp_left.filament_open,,,182400\n"
    "2026-04-02,CV2-009,stop_lamps,,g_rear,high_resistance,\n"
    "2026-05-20,CV2-011,stop_lamps,none,,,99000.5\n"
    '2026-06-01,"CV2-003, spare",stop_lamps,f12.blown,,,1_000\n'
)
_CELLS = ("2026-02-30", "0000-00-00", "2026-13-01", "20260314", "2026-3-14", "nan", "inf", "-1", "1e8", "1e999",
          "99999999", "", " ", '"', '""', '"a\nb"', "a,b", "=HYPERLINK(\"x\")", "+1", "@SUM(1)", "\x1b[2J",
          "\u202eevil", "none", "x" * 200_000, "stop_lamps", "unknown_ruleset", "lamp_left.", ".open", "é",
          "\ufeffdate")


@st.composite
def mutated_history(draw: st.DrawFn) -> tuple[str, bytes]:
    lines = HISTORY_BASE.split("\n")
    kind = draw(st.sampled_from(("cell", "delete_line", "duplicate_line", "random_bytes", "truncate", "header",
                                 "delimiter", "bom", "random_text")))
    if kind == "cell":
        i = draw(st.integers(0, len(lines) - 2))
        cells = lines[i].split(",")
        j = draw(st.integers(0, len(cells) - 1))
        cells[j] = draw(st.sampled_from(_CELLS))
        lines[i] = ",".join(cells)
    elif kind == "delete_line":
        del lines[draw(st.integers(0, len(lines) - 1))]
    elif kind == "duplicate_line":
        lines.insert(draw(st.integers(0, len(lines))), lines[draw(st.integers(0, len(lines) - 1))])
    elif kind == "header":
        header = lines[0].split(",")
        j = draw(st.integers(0, len(header) - 1))
        header[j] = draw(st.sampled_from(("DATE", " date ", "date", "", "vehicle", "Ruleset", "fault ", "x")))
        lines[0] = ",".join(header)
    elif kind == "delimiter":
        lines = [line.replace(",", draw(st.sampled_from((";", "\t", "|")))) for line in lines]
    elif kind == "random_text":
        i = draw(st.integers(0, len(lines) - 1))
        lines.insert(i, draw(st.text(max_size=60)))
    text = "\n".join(lines)
    data = text.encode("utf-8", "surrogatepass")
    if kind == "bom":
        data = b"\xef\xbb\xbf" + data
    elif kind == "random_bytes":
        buf = bytearray(data)
        for _ in range(draw(st.integers(1, 10))):
            buf.insert(draw(st.integers(0, len(buf))), draw(st.integers(0, 255)))
        data = bytes(buf)
    elif kind == "truncate":
        data = data[: draw(st.integers(0, len(data)))]
    return kind, data


def check_history(data: bytes, folder: Path) -> str:
    """Repairs with sound values, or a HistoryError at FILE:ROW on one line."""
    path = folder / "history.csv"
    path.write_bytes(data)
    try:
        repairs = read_history(path, {"stop_lamps"})
    except HistoryError as err:
        assert err.file == str(path) and err.line is not None and err.line >= 1, f"not located: {err}"
        _one_line(str(err))
        return "refused"
    for r in repairs:
        assert r.ruleset_id == "stop_lamps" and r.vehicle and r.fault_id
        assert r.odometer_km is None or (math.isfinite(r.odometer_km) and r.odometer_km >= 0)
    return "accepted"


# --------------------------------------------------------------------------- exports


@lru_cache(maxsize=1)
def export_base() -> str:
    record = SessionRecord.model_validate_json(DEMO_SESSION.read_text(encoding="utf-8"))
    return json.dumps(export_session(record))


def _paths(value: Any, prefix: tuple[Any, ...] = ()) -> list[tuple[Any, ...]]:
    out = [prefix]
    if isinstance(value, dict):
        for k, v in value.items():
            out += _paths(v, prefix + (k,))
    elif isinstance(value, list):
        for i, v in enumerate(value):
            out += _paths(v, prefix + (i,))
    return out


def _at(doc: Any, path: tuple[Any, ...]) -> Any:
    for part in path:
        doc = doc[part]
    return doc


def _parent(doc: Any, path: tuple[Any, ...]) -> Any:
    return _at(doc, path[:-1])


_JSON_VALUES = st.one_of(
    st.none(), st.booleans(), st.integers(), st.floats(allow_nan=True, allow_infinity=True), st.text(max_size=20),
    st.sampled_from(([], {}, [None], {"a": 1}, "OL", "", "0" * 64, "in range", 10**400, -(2**70))),
)


def _prune(value: Any) -> Any:
    """The export's documented canonical form: null members and empty lists left out."""
    if isinstance(value, dict):
        return {k: _prune(v) for k, v in value.items() if v is not None and v != []}
    if isinstance(value, list):
        return [_prune(v) for v in value]
    return value


def _text(value: Any) -> str:
    return json.dumps(value, sort_keys=True, default=repr)


def _change(doc: Any, original: Any) -> str:
    """"same", "changed", or "equivalent" (differs only by null members or empty lists, which
    the canonical form leaves out: verify may then pass or fail)."""
    if _text(doc) == _text(original):
        return "same"
    return "equivalent" if _text(_prune(doc)) == _text(_prune(original)) else "changed"


@st.composite
def tampered_export(draw: st.DrawFn) -> tuple[str, Any, str]:
    """(kind, document, change): the demo export with one change, or damaged JSON text."""
    original = json.loads(export_base())
    doc = copy.deepcopy(original)
    kind = draw(st.sampled_from(("set", "delete", "add", "swap_steps", "duplicate_step", "text", "not_object",
                                 "nonfinite")))
    paths = [p for p in _paths(doc) if p]
    if kind == "nonfinite":  # JSON readers take NaN and Infinity; the seal cannot
        numeric = [p for p in paths if isinstance(_at(doc, p), (int, float)) and not isinstance(_at(doc, p), bool)]
        path = draw(st.sampled_from(numeric))
        _parent(doc, path)[path[-1]] = draw(st.sampled_from((math.nan, math.inf, -math.inf)))
    elif kind in ("set", "delete", "add"):
        path = draw(st.sampled_from(paths))
        parent = doc
        for part in path[:-1]:
            parent = parent[part]
        last = path[-1]
        if kind == "set":
            parent[last] = draw(_JSON_VALUES)
        elif kind == "delete":
            del parent[last]
        elif isinstance(parent, dict):
            parent[draw(st.text(max_size=8)) or "extra"] = draw(_JSON_VALUES)
        else:
            parent.insert(int(last), draw(_JSON_VALUES))
    elif kind in ("swap_steps", "duplicate_step"):
        steps = doc["steps"]
        i, j = draw(st.integers(0, len(steps) - 1)), draw(st.integers(0, len(steps) - 1))
        if kind == "swap_steps":
            steps[i], steps[j] = steps[j], steps[i]
        else:
            steps.insert(j, copy.deepcopy(steps[i]))
    elif kind == "text":
        text = export_base()
        pos = draw(st.integers(0, len(text) - 1))
        text = text[:pos] + draw(st.sampled_from(("0", "1", "x", '"', ",", "}", "NaN", "-", " ", "\\u0000"))) + text[pos + 1:]
        try:
            doc = json.loads(text)
        except ValueError:
            doc = text  # not JSON any more: verify gets the text itself
    else:
        doc = draw(st.one_of(st.none(), st.lists(st.integers(), max_size=3), st.text(max_size=10)))
    return kind, doc, _change(doc, original)


def check_export(case: tuple[str, Any, str]) -> str:
    """verify_export never raises; any change makes it fail, naming a place; no change passes."""
    _kind, doc, change = case
    result = verify_export(doc)
    _one_line(result.message)
    if change == "changed":
        assert not result.intact, f"a changed export verified intact: {result.message}"
        assert result.place or not isinstance(doc, dict), f"a failure that names no place: {result.message}"
    elif change == "same":
        assert result.intact, f"an unchanged export failed: {result.message}"
    return "accepted" if result.intact else "refused"

