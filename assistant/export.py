"""The JSON export of a session and its integrity check: a SHA-256 hash chain over every step.

Each step is sealed as it is committed: its digest is SHA-256 over the canonical JSON of the
step (without its digest) together with the previous step's digest, so a step cannot be
changed, removed or reordered without breaking every digest after it. The session header
(vehicle, technician, complaint, ruleset and its hash, overlays, times, outcome, cautions) is
sealed at export time: one digest per field, a header digest over those, and the session
digest over the header digest, the number of steps and the last step's digest. The session
digest is what the report prints and ``ohmtrail verify`` recomputes; it is a pure function of
the record, so a report and an export of the same record carry the same digest.

Canonical JSON here means: ``json.dumps`` with sorted keys, no whitespace, non-ASCII kept and
encoded as UTF-8, numbers as Python writes them (shortest round-trip form for floats, no NaN or
infinity); members that are ``null`` or an empty list are left out, so that a record written
before an optional field was added keeps its digests. The format is documented, with its
version, in docs/export-format.md.

A hash chain without a secret key proves that an export matches a digest recorded elsewhere
(on the printed claim report, in the fleet's records); it cannot stop someone from rewriting
a whole export and recomputing every digest. Keep the digest from the report.
"""

from __future__ import annotations

import hashlib
import json
import logging
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from pathlib import Path
from typing import Any

from pydantic import ValidationError

from assistant.errors import IntegrityError
from assistant.record import SessionRecord, Step

log = logging.getLogger("ohmtrail.export")

FORMAT = "ohmtrail-session"
FORMAT_VERSION = 1
ALGORITHM = "sha256"

# Domain tags keep a step digest, a field digest and a session digest from ever being
# confused for one another, and name the version of the sealing rule.
_STEP_TAG = "ohmtrail-step-1"
_FIELD_TAG = "ohmtrail-field-1"
_HEADER_TAG = "ohmtrail-header-1"
_SESSION_TAG = "ohmtrail-session-1"

_TOP_KEYS = ("format", "format_version", "session", "steps", "integrity")
_INTEGRITY_KEYS = ("algorithm", "fields", "header_digest", "step_count", "last_step_digest",
                   "digest")


def canonical_json(value: Any) -> bytes:
    """The canonical UTF-8 JSON bytes of a JSON-shaped value (see the module docstring)."""
    try:
        text = json.dumps(_prune(value), sort_keys=True, separators=(",", ":"),
                          ensure_ascii=False, allow_nan=False)
        return text.encode("utf-8")
    except (ValueError, TypeError, UnicodeEncodeError) as exc:
        raise IntegrityError(f"cannot seal a value that is not plain JSON: {exc}") from exc


def _prune(value: Any) -> Any:
    if isinstance(value, Mapping):
        return {str(k): _prune(v) for k, v in value.items() if v is not None and v != []}
    if isinstance(value, (list, tuple)):
        return [_prune(v) for v in value]
    return value


def _sha256(tag: str, payload: Any) -> str:
    return hashlib.sha256(canonical_json({"tag": tag, "payload": payload})).hexdigest()


def _step_payload_digest(previous_digest: str | None, step_data: Mapping[str, Any]) -> str:
    body = {k: v for k, v in step_data.items() if k != "digest"}
    return _sha256(_STEP_TAG, {"previous": previous_digest, "step": body})


def step_digest(previous_digest: str | None, step: Step) -> str:
    """SHA-256 hex of a step (its ``digest`` field left out) chained to the previous digest.

    ``previous_digest`` is ``None`` for the first step of a session.
    """
    return _step_payload_digest(previous_digest, step.model_dump(mode="json"))


def chain_digests(steps: Sequence[Step]) -> tuple[str, ...]:
    """The digest each step should carry, computed afresh from their contents, in order."""
    digests: list[str] = []
    previous: str | None = None
    for step in steps:
        previous = step_digest(previous, step)
        digests.append(previous)
    return tuple(digests)


def seal_steps(steps: Sequence[Step]) -> tuple[Step, ...]:
    """The steps with every missing digest filled in; digests already stored are kept as they are."""
    sealed: list[Step] = []
    previous: str | None = None
    for step in steps:
        if step.digest is None:
            step = step.model_copy(update={"digest": step_digest(previous, step)})
        sealed.append(step)
        previous = step.digest
    return tuple(sealed)


def _header(record_data: Mapping[str, Any]) -> dict[str, Any]:
    return {k: v for k, v in record_data.items() if k != "steps"}


def _flatten(prefix: str, value: Any, out: dict[str, Any]) -> None:
    # Objects become dotted paths so that verify can name the leaf that changed; lists are leaves.
    if isinstance(value, Mapping) and value:
        for key in sorted(value):
            _flatten(f"{prefix}.{key}", value[key], out)
    else:
        out[prefix] = value


def _field_digests(document: Mapping[str, Any]) -> dict[str, str]:
    leaves: dict[str, Any] = {}
    for key in ("format", "format_version", "session"):
        _flatten(key, document.get(key), leaves)
    return {path: _sha256(_FIELD_TAG, {"field": path, "value": value})
            for path, value in leaves.items()}


def _header_digest(fields: Mapping[str, str]) -> str:
    return _sha256(_HEADER_TAG, dict(fields))


def _session_digest(header_digest: str, step_count: int, last_step_digest: str | None) -> str:
    return _sha256(_SESSION_TAG, {"header": header_digest, "step_count": step_count,
                                  "last_step": last_step_digest})


def export_session(record: SessionRecord) -> dict[str, Any]:
    """The record as a JSON-ready dict in export format 1, sealed with its session digest.

    Steps keep the digests the store holds (so that an edit in the store shows up when the
    export is verified); steps stored without one get it computed here.
    """
    data = record.model_dump(mode="json")
    steps = [step.model_dump(mode="json") for step in seal_steps(record.steps)]
    document: dict[str, Any] = {
        "format": FORMAT,
        "format_version": FORMAT_VERSION,
        "session": _header(data),
        "steps": steps,
    }
    fields = _field_digests(document)
    header_digest = _header_digest(fields)
    last = steps[-1]["digest"] if steps else None
    document["integrity"] = {
        "algorithm": ALGORITHM,
        "fields": fields,
        "header_digest": header_digest,
        "step_count": len(steps),
        "last_step_digest": last,
        "digest": _session_digest(header_digest, len(steps), last),
    }
    log.info("exported session %s: %d steps, digest %s", record.id, len(steps),
             document["integrity"]["digest"])
    return document


def session_digest(record: SessionRecord) -> str:
    """The session digest of a record: the one its export and its report carry."""
    return str(export_session(record)["integrity"]["digest"])


@dataclass(frozen=True)
class VerifyResult:
    """What ``verify_export`` found: intact, or the first place that differs and why.

    ``place`` is a path into the export (``steps[3]``, ``session.vehicle.odometer_km``,
    ``integrity.digest``); ``step_index`` is set when the place is a step.
    """

    intact: bool
    message: str
    digest: str | None = None  # the session digest as recomputed (when the steps allowed it)
    step_count: int = 0
    place: str | None = None
    step_index: int | None = None

    def __bool__(self) -> bool:
        return self.intact


def _fail(message: str, place: str | None, *, step_index: int | None = None,
          step_count: int = 0) -> VerifyResult:
    return VerifyResult(False, _one_line(message), place=None if place is None else _one_line(place),
                        step_index=step_index, step_count=step_count)


def _one_line(text: str, limit: int = 400) -> str:
    """A message that quotes the document's own keys and values, kept to one printable line.

    (Found by fuzzing: a member name holding a newline made ``ohmtrail verify`` print two lines.)
    """
    shown = "".join(c if c.isprintable() else repr(c)[1:-1] for c in text)
    return shown if len(shown) <= limit else shown[: limit - 3] + "..."


def _step_label(raw: Mapping[str, Any], position: int) -> str:
    kind = raw.get("kind", "?")
    test = raw.get("test_id")
    what = f"{kind} {test}" if test else str(kind)
    return f"step {position} ({what}, at {raw.get('at', '?')})"


def verify_export(data: Any) -> VerifyResult:
    """Recompute the chain and the session digest of an exported session.

    Never raises for a damaged document: every problem comes back as a failed result naming
    the first place that differs (the first step, then the header field, then the seal).
    """
    if not isinstance(data, Mapping):
        return _fail("not an ohmtrail session export (the top level is not a JSON object)", None)
    if data.get("format") != FORMAT:
        return _fail(f"not an ohmtrail session export (format is {data.get('format')!r})",
                     "format")
    version = data.get("format_version")
    if version != FORMAT_VERSION:
        return _fail(f"export format version {version!r} is not one this ohmtrail reads "
                     f"(it reads {FORMAT_VERSION})", "format_version")
    for key in data:
        if key not in _TOP_KEYS:
            return _fail(f"unexpected member {key!r}: not part of a sealed export", str(key))
    session, steps, integrity = data.get("session"), data.get("steps"), data.get("integrity")
    if not isinstance(session, Mapping):
        return _fail("the session header is missing or not an object", "session")
    if not isinstance(steps, list):
        return _fail("the steps are missing or not a list", "steps")
    if not isinstance(integrity, Mapping):
        return _fail("the integrity block is missing or not an object", "integrity")
    for key in integrity:
        if key not in _INTEGRITY_KEYS:
            return _fail(f"unexpected member {key!r} in the integrity block",
                         f"integrity.{key}")
    if integrity.get("algorithm") != ALGORITHM:
        return _fail(f"unknown digest algorithm {integrity.get('algorithm')!r}",
                     "integrity.algorithm")

    previous: str | None = None
    for position, raw in enumerate(steps):
        place = f"steps[{position}]"
        if not isinstance(raw, Mapping):
            return _fail(f"step {position} is not an object", place, step_index=position)
        try:
            Step.model_validate(raw)
        except ValidationError as exc:
            first = exc.errors()[0]
            where = ".".join(str(p) for p in first["loc"])
            return _fail(f"{_step_label(raw, position)} is not a valid step: {where}: "
                         f"{first['msg']}", place, step_index=position)
        if raw.get("index") != position:
            return _fail(f"{_step_label(raw, position)} has index {raw.get('index')!r} at "
                         f"position {position}: a step was removed, added or reordered",
                         place, step_index=position)
        try:
            expected = _step_payload_digest(previous, raw)
        except IntegrityError:  # NaN or infinity: JSON's reader takes them, the seal cannot
            return _fail(f"{_step_label(raw, position)} holds a number that is not plain JSON "
                         "(NaN or infinity): it was changed after it was recorded",
                         place, step_index=position)
        if raw.get("digest") != expected:
            return _fail(f"{_step_label(raw, position)} does not match its digest: it was "
                         "changed after it was recorded, or a step before it was",
                         place, step_index=position)
        previous = expected

    try:
        SessionRecord.model_validate({**session, "steps": steps})
    except ValidationError as exc:
        first = exc.errors()[0]
        where = ".".join(str(p) for p in first["loc"])
        return _fail(f"the session header is not valid: {where}: {first['msg']}",
                     f"session.{where}")

    stored_fields = integrity.get("fields")
    if not isinstance(stored_fields, Mapping):
        return _fail("the field digests are missing", "integrity.fields")
    try:
        fields = _field_digests(data)
    except IntegrityError:
        return _fail("the session header holds a number that is not plain JSON (NaN or infinity): "
                     "it was changed after it was sealed", "session")
    for path, digest in fields.items():
        if path not in stored_fields:
            return _fail(f"{path} is not among the sealed fields: it was added", path)
        if stored_fields[path] != digest:
            return _fail(f"{path} does not match its digest: it was changed", path)
    for path in stored_fields:
        if path not in fields:
            return _fail(f"{path} was sealed but is missing: it was removed", str(path))
    header_digest = _header_digest(fields)
    if integrity.get("header_digest") != header_digest:
        return _fail("the header digest does not match the field digests",
                     "integrity.header_digest")
    if integrity.get("step_count") != len(steps):
        return _fail(f"{len(steps)} steps in the export, {integrity.get('step_count')!r} sealed: "
                     "steps were removed or added at the end", "integrity.step_count")
    if integrity.get("last_step_digest") != previous:
        return _fail("the last step's digest does not match the sealed one: steps were removed "
                     "or added at the end", "integrity.last_step_digest")
    digest = _session_digest(header_digest, len(steps), previous)
    if integrity.get("digest") != digest:
        return _fail("the session digest does not match", "integrity.digest")
    return VerifyResult(True, f"intact: {len(steps)} steps, session digest {digest}",
                        digest=digest, step_count=len(steps))


def check_record(record: SessionRecord) -> VerifyResult:
    """Check a stored record: the digests its steps carry against their contents, and its seal."""
    return verify_export(export_session(record))


def record_from_export(data: Mapping[str, Any]) -> SessionRecord:
    """The session record an export holds; IntegrityError unless the export verifies intact."""
    result = verify_export(data)
    if not result.intact:
        raise IntegrityError(result.message)
    return SessionRecord.model_validate({**data["session"], "steps": data["steps"]})


def export_json(record: SessionRecord) -> str:
    """The export of a record as JSON text (indented, UTF-8 characters kept), ending in a newline."""
    return json.dumps(export_session(record), indent=2, ensure_ascii=False) + "\n"


def read_export(path: Path) -> Any:
    """The JSON document in an export file; IntegrityError naming the file if it cannot be read."""
    try:
        text = path.read_text(encoding="utf-8")
    except (OSError, UnicodeDecodeError) as exc:
        reason = exc.strerror if isinstance(exc, OSError) and exc.strerror else str(exc)
        raise IntegrityError(f"{path}: cannot read: {reason}") from exc
    try:
        return json.loads(text)
    except json.JSONDecodeError as exc:
        raise IntegrityError(f"{path}:{exc.lineno}:{exc.colno}: not JSON: {exc.msg}") from exc
