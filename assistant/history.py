"""A fleet's repair history: confirmed repairs read from a CSV file or from closed sessions.

The CSV file has a header row; column names are matched without regard to case or
surrounding spaces, in any order, and other columns (notes, technician) are ignored::

    date,vehicle,ruleset,fault,component,mode,odometer_km
    2026-03-14,CV2-017,stop_lamps,lamp_left.filament_open,,,182400
    2026-04-02,CV2-009,stop_lamps,,g_rear,high_resistance,

- ``date``: the repair date, ``YYYY-MM-DD`` (required);
- ``vehicle``: the fleet number or VIN (required, not empty);
- ``ruleset``: the id of the ruleset the repair belongs to (required);
- ``fault``: the confirmed fault id ``<component>.<mode>``, or else both ``component`` and
  ``mode``; ``none`` records a visit where no fault was found in this circuit;
- ``odometer_km``: optional, a number of kilometres.

Every row that cannot be read is a :class:`HistoryError` at ``FILE:ROW:COLUMN`` (the header is
row 1). Fault ids are not checked here: that needs the ruleset (``assistant.learn``).
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import logging
from collections.abc import Collection, Iterable
from dataclasses import dataclass
from pathlib import Path

from assistant.errors import HistoryError, StoreError
from assistant.record import SessionRecord

log = logging.getLogger("ohmtrail.history")

REQUIRED_COLUMNS = ("date", "vehicle", "ruleset")
FAULT_COLUMNS = ("fault", "component", "mode")
OPTIONAL_COLUMNS = ("odometer_km",)
HEADER = "date,vehicle,ruleset,fault,component,mode,odometer_km"


@dataclass(frozen=True)
class Repair:
    """One confirmed repair: which fault of which ruleset, on which vehicle, when."""

    date: dt.date
    vehicle: str
    ruleset_id: str
    fault_id: str  # "<component>.<mode>", or "none" for no fault found
    odometer_km: float | None
    source: str  # "FILE:ROW" or "session ID"


def read_history(path: str | Path, known_rulesets: Collection[str]) -> tuple[Repair, ...]:
    """Every repair in a history CSV file; a located HistoryError for the first bad row.

    ``known_rulesets`` are the ruleset ids a row may name; any other id is an error (a typo
    would otherwise drop the row unseen).
    """
    name = str(path)
    text = _text(Path(path), name)
    reader = csv.reader(io.StringIO(text, newline=""))
    try:
        header = next(reader)
    except StopIteration:  # pragma: no cover - _text rejects empty files
        raise HistoryError("is empty; the first row must be the header: " + HEADER, file=name, line=1) from None
    except csv.Error as exc:
        raise HistoryError(f"CSV: {exc}", file=name, line=1) from exc
    columns = _columns(header, name)
    repairs: list[Repair] = []
    row_number = 1
    try:
        for row in reader:
            row_number = reader.line_num
            if not any(cell.strip() for cell in row):
                continue
            repairs.append(_repair(row, columns, name, row_number, known_rulesets))
    except csv.Error as exc:
        raise HistoryError(f"CSV: {exc}", file=name, line=reader.line_num) from exc
    log.info("%s: %d repairs", name, len(repairs))
    return tuple(repairs)


def _text(path: Path, name: str) -> str:
    try:
        data = path.read_bytes()
    except FileNotFoundError as exc:
        raise HistoryError("no such file", file=name) from exc
    except IsADirectoryError as exc:
        raise HistoryError("is a folder, not a file", file=name) from exc
    except OSError as exc:
        raise HistoryError(f"cannot be read: {exc.strerror or exc}", file=name) from exc
    if b"\x00" in data:
        row = data[: data.index(b"\x00")].count(b"\n") + 1
        raise HistoryError("is a binary file, not CSV text", file=name, line=row)
    try:
        text = data.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        start = exc.start + (3 if data.startswith(b"\xef\xbb\xbf") else 0)
        row = data[:start].count(b"\n") + 1
        raise HistoryError(f"is not UTF-8 text (byte 0x{data[start]:02x}); save it as UTF-8",
                           file=name, line=row) from exc
    if not text.strip():
        raise HistoryError("is empty; the first row must be the header: " + HEADER, file=name, line=1)
    return text


def _columns(header: list[str], name: str) -> dict[str, int]:
    columns: dict[str, int] = {}
    for i, cell in enumerate(header):
        key = cell.strip().lower()
        if key in columns:
            raise HistoryError(f"column '{key}' appears twice in the header", file=name, line=1, column=i + 1)
        if key:
            columns[key] = i
    missing = [c for c in REQUIRED_COLUMNS if c not in columns]
    if "fault" not in columns and not ("component" in columns and "mode" in columns):
        missing.append("fault (or component and mode)")
    if missing:
        raise HistoryError(f"the header lacks column{'s' if len(missing) > 1 else ''} {', '.join(missing)}; "
                           f"expected: {HEADER}", file=name, line=1, field="header")
    return columns


def _repair(row: list[str], columns: dict[str, int], name: str, number: int,
            known_rulesets: Collection[str]) -> Repair:
    def cell(key: str) -> str:
        i = columns.get(key)
        return row[i].strip() if i is not None and i < len(row) else ""

    def fail(message: str, key: str, value: str | None = None) -> HistoryError:
        col = columns.get(key)
        # A quoted cell may hold line breaks or a megabyte; the message stays one short line
        # (found by fuzzing).
        shown = "".join(c if c.isprintable() else repr(c)[1:-1] for c in message)
        shown = shown if len(shown) <= 300 else shown[:297] + "..."
        return HistoryError(shown, file=name, line=number, column=None if col is None else col + 1,
                            field=key, value=value)

    raw_date = cell("date")
    try:
        date = dt.date.fromisoformat(raw_date)
    except ValueError as exc:
        raise fail(f"'{raw_date}' is not a date; write YYYY-MM-DD" if raw_date else "the date is empty",
                   "date", raw_date) from exc
    vehicle = cell("vehicle")
    if not vehicle:
        raise fail("the vehicle is empty", "vehicle")
    ruleset_id = cell("ruleset")
    if not ruleset_id:
        raise fail("the ruleset id is empty", "ruleset")
    if ruleset_id not in known_rulesets:
        raise fail(f"unknown ruleset '{ruleset_id}'; known: {', '.join(sorted(known_rulesets)) or 'none'}",
                   "ruleset", ruleset_id)
    fault = cell("fault")
    if not fault:
        component, mode = cell("component"), cell("mode")
        if not component or not mode:
            raise fail("no fault given: fill 'fault', or both 'component' and 'mode'",
                       "fault" if "fault" in columns else "component")
        fault = f"{component}.{mode}"
    raw_km = cell("odometer_km")
    km: float | None = None
    if raw_km:
        try:
            km = float(raw_km.replace("_", ""))
        except ValueError as exc:
            raise fail(f"odometer '{raw_km}' is not a number of kilometres", "odometer_km", raw_km) from exc
        if not (0 <= km < 1e8):
            raise fail(f"odometer '{raw_km}' is out of range", "odometer_km", raw_km)
    return Repair(date, vehicle, ruleset_id, fault, km, f"{name}:{number}")


def repairs_from_sessions(records: Iterable[SessionRecord]) -> tuple[Repair, ...]:
    """The confirmed repairs of closed sessions: status ``closed`` with a diagnosis and a repair.
    A simulated session (its readings drawn by ``--simulate``) is no repair and is left out."""
    repairs = []
    simulated = 0
    for record in records:
        if record.status != "closed" or not record.diagnosis or not record.repair:
            continue
        if (record.source or "").startswith("simulate"):
            simulated += 1
            continue
        when = record.finished or record.started
        try:
            date = dt.date.fromisoformat(when[:10])
        except ValueError:
            log.warning("session %s: time stamp %r is not ISO 8601; skipped", record.id, when)
            continue
        vehicle = record.vehicle.fleet_number or record.vehicle.vin or "?"
        repairs.append(Repair(date, vehicle, record.ruleset_id, record.diagnosis, record.vehicle.odometer_km,
                              f"session {record.id}"))
    if simulated:
        log.info("%d simulated session(s) left out: a simulated repair is not one", simulated)
    return tuple(repairs)


def repairs_from_store(url: str | None) -> tuple[Repair, ...]:
    """The confirmed repairs of the closed sessions in the session store at ``url`` (default store if None)."""
    try:
        from assistant import store as _store
    except ImportError as exc:
        raise StoreError("the session store is not part of this build; use --history FILE") from exc
    with _store.open_store(url) as db:
        records = [db.load(summary.id) for summary in db.list() if summary.status == "closed"]
    return repairs_from_sessions(records)


def known_ruleset_ids(paths: Iterable[str | Path]) -> set[str]:
    """The ids of the rulesets under ``paths`` (files or folders); files that do not load are skipped."""
    from assistant.errors import RulesetError
    from assistant.ruleset.load import load_ruleset, ruleset_files

    ids: set[str] = set()
    for path in ruleset_files(paths):
        try:
            ids.add(load_ruleset(path, beside=False).ruleset.id)
        except RulesetError as exc:
            log.warning("%s: not read for its ruleset id (%s)", path, exc)
    return ids


def default_ruleset_roots(ruleset_path: str | Path) -> tuple[Path, ...]:
    """Where to look for the ruleset ids a history may name: the ``rulesets`` folder the ruleset
    is in (at any depth), else the ruleset's own folder."""
    folder = Path(ruleset_path).resolve().parent
    for candidate in (folder, *folder.parents):
        if candidate.name == "rulesets":
            return (candidate,)
    return (folder,)
