"""A reading as the technician gives it: a value with its unit, an OL display, or an outcome.

:func:`parse_reading` turns what was typed at the prompt (or written in an answers file) into a
:class:`Reading` for one test, once, at the edge; everything after it works in SI floats.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from typing import TYPE_CHECKING

from assistant.errors import QuantityError, ReadingError
from assistant.ruleset.quantities import CURRENT, RESISTANCE, VOLTAGE, parse_quantity

if TYPE_CHECKING:
    from assistant.predict import TestInfo


@dataclass(frozen=True)
class Reading:
    """One answer to a test.

    Exactly one of: ``value`` (SI float: V, ohm or A), ``overload`` (the meter showed OL),
    ``outcome`` (an observation's answer, e.g. "yes"). ``text`` is what was typed or drawn.
    """

    text: str
    value: float | None = None
    overload: bool = False
    outcome: str | None = None

    def __post_init__(self) -> None:
        given = (self.value is not None) + bool(self.overload) + (self.outcome is not None)
        if given != 1:
            raise ValueError("a reading is exactly one of: a value, OL, an outcome")


# --------------------------------------------------------------------------- parsing what is typed

_NUMBER = r"[-+]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][-+]?\d+)?"
_VALUE = re.compile(rf"^({_NUMBER})\s*(.*)$")
# "6k5" (6.5 k), "4R7" (4.7 ohm), "0m5" (0.5 m): the letter stands where the decimal point goes.
_LETTER_POINT = re.compile(r"^([-+]?\d+)([kKMmuµRVA])(\d+)\s*(.*)$")
_OVERLOAD = re.compile(r"^[-+]?\s*(?:O\.?\s*L\.?|OL|0L|overload|over\s*range)$", re.IGNORECASE)
_PREFIXES = {"k": "k", "K": "k", "M": "M", "m": "m", "u": "u", "µ": "u", "μ": "u"}
_LETTER_UNITS = {"R": "ohm", "V": "V", "A": "A"}
# Spellings typed at the vehicle that pint does not take as meant ("k" alone is Boltzmann's
# constant to pint, "a" is a year): matched without regard to case where that is unambiguous.
_TYPED_UNITS = {
    "v": "V", "volt": "V", "volts": "V", "mv": "mV", "millivolt": "mV", "millivolts": "mV",
    "kv": "kV", "a": "A", "amp": "A", "amps": "A", "ampere": "A", "amperes": "A", "ma": "mA",
    "milliamp": "mA", "milliamps": "mA", "ua": "uA", "µa": "uA", "μa": "uA",
    "ohm": "ohm", "ohms": "ohm", "ω": "ohm", "Ω": "ohm", "r": "ohm",
    "kohm": "kohm", "kohms": "kohm", "kω": "kohm", "kΩ": "kohm", "k ohm": "kohm",
    "megohm": "Mohm", "megohms": "Mohm", "meg": "Mohm", "mω": "Mohm", "MΩ": "Mohm",
    "milliohm": "mohm", "milliohms": "mohm", "mΩ": "mohm",
}
# Case matters for these: mohm is a milliohm, Mohm a megohm.
_CASED_UNITS = {"Mohm": "Mohm", "Mohms": "Mohm", "mohm": "mohm", "mohms": "mohm", "MV": "MV"}
_DIMENSIONS = {"V": VOLTAGE, "ohm": RESISTANCE, "A": CURRENT}
_EXAMPLES = {"V": "11.8, 11.8 V or 118 mV", "ohm": "0.7, 6.5 kohm, 6k5 or OL", "A": "1.75, 1.75 A or 420 mA"}


def parse_reading(text: str, test: TestInfo) -> Reading:
    """The reading a technician typed for ``test``: a value in SI units, OL, or an outcome.

    A bare number is in the test's unit; ``118 mV``, ``6.5 kohm``, ``6k5``, ``4R7`` and
    ``11,8`` (decimal comma) are understood. Observations take one of their outcomes (a
    unique prefix will do: ``y`` for ``yes``). Raises :class:`ReadingError` with a one-line
    reason for anything else, including a value of the wrong dimension.
    """
    typed = " ".join(str(text).split())
    if not typed:
        raise ReadingError(_hint("nothing was typed", test))
    if test.kind == "observation" or not test.unit:
        return _outcome(typed, test)
    if _OVERLOAD.match(typed):
        return Reading(text="OL", overload=True)
    dim = _DIMENSIONS.get(test.unit)
    if dim is None:
        raise ReadingError(f"test '{test.id}' has a unit ohmtrail cannot read ({test.unit!r})")
    number, unit = _split(typed, test)
    if unit:
        try:
            value = parse_quantity(f"{number} {unit}", dim)
        except QuantityError as exc:
            raise ReadingError(_wrong_unit(typed, unit, test)) from exc
    else:
        value = float(number)
    if not math.isfinite(value):
        raise ReadingError(_hint(f"{_shown(typed)} is not a finite number", test))
    # 118 mV is 0.118 V, not pint's 0.11800000000000001: keep the digits that were typed.
    return Reading(text=typed, value=float(f"{value:.12g}"))


def _split(typed: str, test: TestInfo) -> tuple[str, str]:
    """The number (with a decimal point) and the unit text, spellings made plain for pint."""
    compact = typed.replace(",", ".") if typed.count(",") == 1 and "." not in typed else typed
    letter = _LETTER_POINT.match(compact)
    if letter:
        whole, mark, fraction, rest = letter.groups()
        number = f"{whole}.{fraction}"
        if mark in _LETTER_UNITS:
            if rest:
                raise ReadingError(_hint(f"{_shown(typed)} mixes two ways of writing a unit", test))
            return number, _LETTER_UNITS[mark]
        return number, _prefixed(_PREFIXES[mark], rest, typed, test)
    match = _VALUE.match(compact)
    if not match:
        raise ReadingError(_hint(f"{_shown(typed)} is not a reading", test))
    number, rest = match.group(1), match.group(2).strip()
    if not rest:
        return number, ""
    if rest in _PREFIXES:
        return number, _prefixed(_PREFIXES[rest], "", typed, test)
    return number, _plain_unit(rest)


def _prefixed(prefix: str, rest: str, typed: str, test: TestInfo) -> str:
    unit = _plain_unit(rest) if rest else test.unit
    if unit not in _DIMENSIONS and unit not in ("ohm",):
        raise ReadingError(_wrong_unit(typed, rest, test))
    return f"{prefix}{unit}"


def _plain_unit(unit: str) -> str:
    squeezed = unit.replace(" ", "") if unit.lower().replace(" ", "") != "kohm" else "kohm"
    if squeezed in _CASED_UNITS:
        return _CASED_UNITS[squeezed]
    return _TYPED_UNITS.get(squeezed, _TYPED_UNITS.get(squeezed.lower(), squeezed))


def _outcome(typed: str, test: TestInfo) -> Reading:
    outcomes = test.outcomes or ("yes", "no")
    word = typed.lower()
    exact = [o for o in outcomes if o.lower() == word]
    found = exact or [o for o in outcomes if o.lower().startswith(word)]
    if len(found) == 1:
        return Reading(text=found[0], outcome=found[0])
    choices = ", ".join(outcomes)
    if found:
        raise ReadingError(f"{_shown(typed)} could be any of {', '.join(found)}; answer one of: {choices}")
    raise ReadingError(f"{_shown(typed)} is not an answer to this question; answer one of: {choices}")


def _wrong_unit(typed: str, unit: str, test: TestInfo) -> str:
    dim = _DIMENSIONS[test.unit]
    return _hint(f"{_shown(typed)} is not a {dim.name}", test)


def _shown(typed: str, limit: int = 40) -> str:
    """What was typed, quoted for a one-line message: unprintable characters escaped, long text cut.

    (Found by fuzzing: a pasted kilobyte came back whole in the message, and an escape
    sequence typed at the prompt would have reached the terminal in it.)
    """
    text = "".join(c if c.isprintable() else f"\\x{ord(c):02x}" if ord(c) < 256 else f"\\u{ord(c):04x}"
                   for c in typed[: limit + 1])
    return f"'{text[:limit]}...'" if len(typed) > limit or len(text) > limit else f"'{text}'"


def _hint(reason: str, test: TestInfo) -> str:
    dim = _DIMENSIONS.get(test.unit)
    if dim is None:
        return reason
    return f"{reason}; this test reads a {dim.name} in {test.unit}, e.g. {_EXAMPLES[test.unit]}"
