"""The JSON export and its hash chain: digests as documented, and every edit of an export caught.

The session is demo data (tests/data/stop_lamp_session.json: the Larkspur CV-2 van, our own
invented vehicle, left stop lamp dim, a corroded ground found). SHA-256 is FIPS 180-4 as
Python's hashlib computes it; the canonical form is recomputed here from the rule written in
docs/export-format.md, independently of assistant.export.
"""

from __future__ import annotations

import copy
import hashlib
import json
from pathlib import Path
from typing import Any

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from assistant.errors import IntegrityError
from assistant.export import (
    FORMAT_VERSION,
    canonical_json,
    chain_digests,
    check_record,
    export_session,
    record_from_export,
    seal_steps,
    session_digest,
    step_digest,
    verify_export,
)
from assistant.record import SessionRecord, Step

DATA = Path(__file__).parent / "data"


def load_session() -> SessionRecord:
    return SessionRecord.model_validate_json((DATA / "stop_lamp_session.json").read_text("utf-8"))


def _documented_step_digest(previous: str | None, step: dict[str, Any]) -> str:
    # docs/export-format.md, "Step digests", written out by hand.
    def prune(v: Any) -> Any:
        if isinstance(v, dict):
            return {k: prune(x) for k, x in v.items() if x is not None and x != []}
        if isinstance(v, list):
            return [prune(x) for x in v]
        return v

    body = {k: v for k, v in step.items() if k != "digest"}
    payload = prune({"tag": "ohmtrail-step-1", "payload": {"previous": previous, "step": body}})
    text = json.dumps(payload, sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    return hashlib.sha256(text.encode("utf-8")).hexdigest()


def test_step_digest_follows_the_documented_rule() -> None:
    record = load_session()
    previous = None
    for step in record.steps:
        expected = _documented_step_digest(previous, step.model_dump(mode="json"))
        assert step_digest(previous, step) == expected
        previous = expected


def test_stored_digests_of_the_demo_session_match_their_steps() -> None:
    record = load_session()
    assert tuple(s.digest for s in record.steps) == chain_digests(record.steps)
    assert check_record(record).intact


def test_step_digest_leaves_out_the_digest_and_chains_to_the_previous() -> None:
    step = load_session().steps[6]
    assert step_digest("a" * 64, step) == step_digest("a" * 64, step.model_copy(update={"digest": "x"}))
    assert step_digest("a" * 64, step) != step_digest("b" * 64, step)
    assert step_digest(None, step) != step_digest("a" * 64, step)
    assert len(step_digest(None, step)) == 64


def test_canonical_json_is_sorted_compact_utf8() -> None:
    assert canonical_json({"b": 1, "a": "Ω", "c": None, "d": []}) == '{"a":"Ω","b":1}'.encode()


def test_canonical_json_refuses_nan() -> None:
    with pytest.raises(IntegrityError):
        canonical_json({"reading": float("nan")})


def test_seal_steps_fills_only_missing_digests() -> None:
    record = load_session()
    bare = tuple(s.model_copy(update={"digest": None}) for s in record.steps)
    assert seal_steps(bare) == record.steps
    forged = (record.steps[0].model_copy(update={"digest": "f" * 64}),) + bare[1:]
    assert seal_steps(forged)[0].digest == "f" * 64  # a stored digest is never overwritten


def test_export_verifies_intact_after_a_json_round_trip() -> None:
    record = load_session()
    data = json.loads(json.dumps(export_session(record), indent=2))
    result = verify_export(data)
    assert result.intact, result.message
    assert result.step_count == len(record.steps)
    assert result.digest == session_digest(record) == data["integrity"]["digest"]
    assert data["format_version"] == FORMAT_VERSION
    assert record_from_export(data) == record


def test_a_store_edit_shows_in_the_export() -> None:
    # A reading edited in the store after it was sealed keeps its old digest; the export keeps
    # it too, so verify names the step.
    record = load_session()
    steps = list(record.steps)
    steps[7] = steps[7].model_copy(update={"reading": 0.31, "reading_text": "0.31"})
    edited = record.model_copy(update={"steps": tuple(steps)})
    result = verify_export(export_session(edited))
    assert not result.intact and result.step_index == 7
    assert not check_record(edited).intact


def _leaves(value: Any, path: tuple[Any, ...] = ()) -> list[tuple[Any, ...]]:
    if isinstance(value, dict):
        return [p for k, v in value.items() for p in _leaves(v, path + (k,))]
    if isinstance(value, list) and value:
        return [p for i, v in enumerate(value) for p in _leaves(v, path + (i,))]
    return [path]


# What a null member becomes, by field name, so that the changed export still validates and
# only the digests can catch it; other nulls become a text.
NULL_TO = {"reading": 1.0, "expected_low": 1.0, "expected_high": 1.0, "refers_to": 0,
           "probability": 0.5, "odometer_km": 1.0, "model_year": 2020}


def _changed(value: Any, name: Any = None) -> Any:
    """A different value of the same kind, so that validation alone would not catch it."""
    if value is None and name in NULL_TO:
        return NULL_TO[name]
    if isinstance(value, bool):
        return not value
    if isinstance(value, int):
        return value + 1
    if isinstance(value, float):
        return value + 0.5
    if isinstance(value, str):
        return value + "x" if not value.startswith(("open", "closed")) else "concluded"
    if value == []:
        return ["x"]
    return "x"  # None


def _get(data: Any, path: tuple[Any, ...]) -> Any:
    for key in path:
        data = data[key]
    return data


def _set(data: Any, path: tuple[Any, ...], value: Any) -> None:
    _get(data, path[:-1])[path[-1]] = value


def _dotted(path: tuple[Any, ...]) -> str:
    head = []
    for key in path:
        if isinstance(key, int):
            break
        head.append(str(key))
    return ".".join(head)


EXPORT = export_session(load_session())
LEAVES = _leaves(EXPORT)


def test_every_part_of_the_export_is_a_leaf_here() -> None:
    # The tamper loop below must reach every step field and every header field.
    tops = {p[0] for p in LEAVES}
    assert tops == {"format", "format_version", "session", "steps", "integrity"}
    step_fields = {p[2] for p in LEAVES if p[0] == "steps"}
    assert step_fields == set(Step.model_fields)
    header_fields = {p[1] for p in LEAVES if p[0] == "session"}
    assert header_fields == set(SessionRecord.model_fields) - {"steps"}


@pytest.mark.parametrize("path", LEAVES, ids=lambda p: ".".join(str(k) for k in p))
def test_changing_any_field_fails_and_names_its_place(path: tuple[Any, ...]) -> None:
    data = copy.deepcopy(EXPORT)
    _set(data, path, _changed(_get(data, path), path[-1]))
    result = verify_export(data)
    assert not result.intact
    assert result.place is not None
    if path[0] == "steps":
        assert result.step_index == path[1]
        assert result.place == f"steps[{path[1]}]"
        assert f"step {path[1]} " in result.message
    elif path[0] == "integrity" and path[1] == "fields":
        assert result.place == path[2]  # the field whose digest no longer matches
    else:
        assert result.place.startswith(_dotted(path)), (result.place, path)


@pytest.mark.parametrize(
    ("edit", "place"),
    [
        # a step taken out of the middle: the one after it no longer chains
        (lambda d: d["steps"].pop(5), "steps[5]"),
        # the last step taken out: the chain is whole, but shorter than sealed
        (lambda d: d["steps"].pop(), "integrity.step_count"),
        # two steps swapped
        (lambda d: d["steps"].insert(3, d["steps"].pop(4)), "steps[3]"),
        # a step appended that was never sealed
        (lambda d: d["steps"].append({**d["steps"][-1], "index": len(d["steps"])}),
         f"steps[{len(EXPORT['steps'])}]"),
        # a header field removed, or one added
        (lambda d: d["session"].pop("technician"), "session.technician"),
        (lambda d: d["session"]["vehicle"].pop("odometer_km"), "session.vehicle.odometer_km"),
        (lambda d: d["session"].update(meter_profile="bench meter"), "session.meter_profile"),
        (lambda d: d["session"]["vehicle"].update(colour="white"), "session.vehicle.colour"),
        (lambda d: d.update(comment="checked"), "comment"),
        (lambda d: d["integrity"].pop("digest"), "integrity.digest"),
        (lambda d: d["integrity"]["fields"].pop("session.complaint"), "session.complaint"),
        (lambda d: d.update(format_version=2), "format_version"),
        (lambda d: d.update(format="something else"), "format"),
        (lambda d: d["steps"].__setitem__(2, "not a step"), "steps[2]"),
    ],
)
def test_structural_edits_fail_and_name_their_place(edit: Any, place: str) -> None:
    data = copy.deepcopy(EXPORT)
    edit(data)
    result = verify_export(data)
    assert not result.intact
    assert result.place == place, result.message


def test_verify_says_what_is_wrong_with_a_document_that_is_no_export() -> None:
    for thing in (None, [], "text", {"format": "ohmtrail-session"}):
        result = verify_export(thing)
        assert not result.intact and result.message


def test_record_from_a_tampered_export_is_refused() -> None:
    data = copy.deepcopy(EXPORT)
    data["steps"][7]["reading"] = 0.03
    with pytest.raises(IntegrityError, match="step 7"):
        record_from_export(data)


@settings(max_examples=40, deadline=None)
@given(note=st.text(max_size=200), reading=st.floats(allow_nan=False, allow_infinity=False))
def test_any_note_and_reading_survive_the_round_trip(note: str, reading: float) -> None:
    record = load_session()
    steps = list(record.steps)
    steps[8] = steps[8].model_copy(update={"note": note, "digest": None})
    steps[7] = steps[7].model_copy(update={"reading": reading, "digest": None})
    bare = tuple(s.model_copy(update={"digest": None}) for s in steps)
    record = record.model_copy(update={"steps": seal_steps(bare)})
    text = json.dumps(export_session(record), ensure_ascii=False)
    assert verify_export(json.loads(text)).intact
