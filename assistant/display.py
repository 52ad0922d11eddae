"""How the trail and the report write values for people: readings, ranges, times, probabilities.

Plain text only; each renderer escapes it for its own medium (DOT, HTML, PDF).
"""

from __future__ import annotations

import math
import re
from datetime import datetime, timezone

from assistant.record import SessionRecord, Step
from assistant.ruleset.defaults import fault_list
from assistant.ruleset.model import Ruleset

_UNIT_SYMBOL = {"ohm": "Ω", "ohms": "Ω", "Ω": "Ω", "v": "V", "a": "A"}
# (factor, prefix) from large to small; the first whose scaled value is at least 1 is used.
_PREFIXES = ((1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "µ"))
# Control characters, line and paragraph separators, surrogates, non-characters, and the
# bidirectional embedding, override and isolate controls (U+202A-U+202E, U+2066-U+2069): in a
# claim report an override could make a reading or a name display in another order than it
# was recorded. The marks U+200E and U+200F stay; right-to-left text needs no more.
_CONTROL = re.compile(r"[\x00-\x08\x0b-\x1f\x7f-\x9f\u2028\u2029\u202a-\u202e\u2066-\u2069"
                      r"\ud800-\udfff\ufffe\uffff]")


def unit_symbol(unit: str | None) -> str:
    """The symbol of a unit as the session stores it ("V", "A", "ohm")."""
    if not unit:
        return ""
    return _UNIT_SYMBOL.get(unit.lower(), _UNIT_SYMBOL.get(unit, unit))


def _prefix_for(magnitude: float, unit: str) -> tuple[float, str]:
    if not unit or magnitude == 0 or not math.isfinite(magnitude):
        return 1.0, ""
    # meters show ohms as 0.9 Ω, not 900 mΩ; volts and amperes below one in milli and micro
    allowed = (tuple(p for p in _PREFIXES if p[0] >= 1.0) if unit == "Ω"
               else tuple(p for p in _PREFIXES if p[0] <= 1.0))
    for factor, prefix in allowed:
        if magnitude >= factor:
            return factor, prefix
    return allowed[-1]


def _number(value: float, factor: float) -> str:
    return f"{value / factor:.4g}"


def format_quantity(value: float | None, unit: str | None) -> str:
    """``0.012, "V"`` -> ``"12 mV"``; ``6.5e3, "ohm"`` -> ``"6.5 kΩ"``; ``None`` -> ``""``."""
    if value is None:
        return ""
    symbol = unit_symbol(unit)
    factor, prefix = _prefix_for(abs(value), symbol)
    return f"{_number(value, factor)} {prefix}{symbol}".strip()


def format_range(low: float | None, high: float | None, unit: str | None) -> str:
    """A healthy range in one prefix: ``0.004, 0.031, "V"`` -> ``"4–31 mV"``."""
    if low is None and high is None:
        return ""
    symbol = unit_symbol(unit)
    if low is None:
        return f"≤ {format_quantity(high, unit)}"
    if high is None:
        return f"≥ {format_quantity(low, unit)}"
    factor, prefix = _prefix_for(max(abs(low), abs(high)), symbol)
    return f"{_number(low, factor)}–{_number(high, factor)} {prefix}{symbol}".strip()


def format_reading(step: Step) -> str:
    """What the meter showed for a step: the value with its unit, or the OL / outcome text."""
    if step.reading is not None:
        return format_quantity(step.reading, step.unit)
    return clean_text(step.reading_text or "")


CANNOT_TELL_APART = "No test left can tell the diagnosis from"  # the report's line on a group


def format_probability(p: float | None) -> str:
    """``0.981`` -> ``"98.1 %"``; tiny but non-zero values do not round to zero."""
    if p is None:
        return ""
    percent = 100.0 * p
    if 0 < percent < 0.1:
        return "<0.1 %"
    return f"{percent:.1f} %"


def parse_time(text: str) -> datetime | None:
    """An ISO 8601 stamp as an aware UTC datetime, or ``None`` if it is not one."""
    try:
        stamp = datetime.fromisoformat(text)
    except (TypeError, ValueError):
        return None
    if stamp.tzinfo is None:
        stamp = stamp.replace(tzinfo=timezone.utc)
    return stamp.astimezone(timezone.utc)


def format_clock(text: str) -> str:
    """The time of day of a stamp, ``"08:17:55"``; the text as given if it is not a stamp."""
    stamp = parse_time(text)
    return stamp.strftime("%H:%M:%S") if stamp else clean_text(text)


def format_stamp(text: str | None) -> str:
    """A full stamp for the report, ``"2026-12-01 08:17:55 UTC"``."""
    if not text:
        return ""
    stamp = parse_time(text)
    return stamp.strftime("%Y-%m-%d %H:%M:%S UTC") if stamp else clean_text(text)


def format_stamp_short(text: str) -> str:
    """A stamp for a table cell, UTC implied: ``"2026-12-01 08:17:55"``."""
    stamp = parse_time(text)
    return stamp.strftime("%Y-%m-%d %H:%M:%S") if stamp else clean_text(text)


def clean_text(text: str) -> str:
    """User text with control characters (other than newline and tab) taken out."""
    return _CONTROL.sub("", text.replace("\r\n", "\n").replace("\r", "\n"))


def complaint_text(record: SessionRecord) -> str:
    """The complaint in words: the start step's text with the complaint id, or what was given."""
    given = clean_text(record.complaint or "")
    start = record.steps[0] if record.steps and record.steps[0].kind == "start" else None
    words = clean_text(start.note or "") if start else ""
    if words and given and words != given:
        return f"{words} ({given})"
    return words or given


def ruleset_names(ruleset: Ruleset) -> dict[str, str]:
    """What to call a ruleset's tests and faults: test titles, "component label: fault mode"."""
    names: dict[str, str] = {"none": "no fault"}
    labels = {c.id: c.label or c.id for c in ruleset.components}
    for fault in fault_list(ruleset):
        names[fault.id] = f"{labels.get(fault.component, fault.component)}: " \
                          f"{fault.mode.replace('_', ' ')}"
    for test in ruleset.tests:
        names[test.id] = test.title or test.id
    return names
