"""Readable quantities ("21 W", "1.5 mm2", "2.2 kohm", "18 AWG") parsed once, at the edge.

Parsing is done by pint; this module only adds the trade's spellings (``mm2``, ``AWG``,
``ohms``) and turns the result into an SI float for the dimension a field expects. A bare
number is taken in the field's own unit (``emf: 12.6`` is 12.6 V).

Pydantic field types are exported as ``Volts``, ``Ohms``, ``Amperes``, ``Watts``, ``Metres``,
``SquareMetres``, ``Minutes``, ``Celsius`` and ``Fraction``: each accepts a number or a text and
validates to a float in the unit its name says.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass
from functools import lru_cache
from typing import TYPE_CHECKING, Annotated, Any, TypeAlias

import pint
from pydantic import BeforeValidator, PlainSerializer, WithJsonSchema

from assistant.errors import QuantityError

_NUMBER = r"[-+]?(?:\d+(?:\.\d*)?|\.\d+)(?:[eE][-+]?\d+)?"
_SPLIT = re.compile(rf"^\s*({_NUMBER})\s*(.*?)\s*$")
_AWG = re.compile(r"^\s*(\d{1,2}|0{1,4}|[1-4]/0)\s*AWG\s*$", re.IGNORECASE)
# "mm2", "cm3": a unit name directly followed by its power.
_POWER = re.compile(r"(?<=[A-Za-zµ])([23])\b")
_SPELLINGS = {"ohms": "ohm", "Ohm": "ohm", "Ohms": "ohm", "amps": "A", "amp": "A", "mins": "min"}


@dataclass(frozen=True)
class Dimension:
    """What a field measures: its pint dimensionality, the unit it stores, and a name for messages."""

    name: str
    unit: str  # the unit the float is stored in
    bare_limit: float | None = None  # bare numbers above it must carry a unit (ambiguous)


VOLTAGE = Dimension("voltage", "V")
RESISTANCE = Dimension("resistance", "ohm")
CURRENT = Dimension("current", "A")
POWER = Dimension("power", "W")
LENGTH = Dimension("length", "m")
# A bare cross-section is in m² (as stored); "1.5" alone is refused: the author meant mm2.
AREA = Dimension("cross-section", "m**2", bare_limit=1e-3)
TIME_MINUTES = Dimension("time", "min")
TEMPERATURE = Dimension("temperature", "degC")
FRACTION = Dimension("fraction", "dimensionless")


@lru_cache(maxsize=1)
def registry() -> pint.UnitRegistry[Any]:
    """The one unit registry of the process (pint registries are costly to build)."""
    return pint.UnitRegistry(autoconvert_offset_to_baseunit=True)


def awg_area_m2(gauge: str) -> float:
    """Cross-section of an American Wire Gauge size, from the standard diameter formula.

    d = 0.127 mm × 92^((36 − n) / 39), where 0000 is n = −3 (ASTM B258).
    """
    g = gauge.strip()
    if "/" in g:
        n = 1 - int(g.split("/")[0])
    elif set(g) == {"0"}:
        n = 1 - len(g)
    else:
        n = int(g)
    d_m = 0.127e-3 * math.pow(92.0, (36 - n) / 39)
    return math.pi * d_m * d_m / 4


def parse_quantity(value: Any, dim: Dimension) -> float:
    """An SI float (in ``dim.unit``) from a number or a text such as ``"118 mV"``.

    Raises :class:`QuantityError` for anything that is not a quantity of that dimension.
    """
    if isinstance(value, bool):
        raise QuantityError(f"expected a {dim.name}, got {value!r}", value=value, expected=dim.unit)
    if isinstance(value, (int, float)):
        number = float(value)
        if not math.isfinite(number):
            raise QuantityError(f"expected a finite {dim.name}, got {value!r}", value=value)
        return _bare(number, value, dim)
    if not isinstance(value, str):
        raise QuantityError(
            f"expected a {dim.name} such as '{_example(dim)}', got {type(value).__name__}",
            value=value,
            expected=dim.unit,
        )
    text = value.strip()
    if dim is AREA:
        awg = _AWG.match(text)
        if awg:
            return awg_area_m2(awg.group(1))
    match = _SPLIT.match(text)
    if not match:
        raise QuantityError(
            f"'{value}' is not a {dim.name}; write a number and a unit, e.g. '{_example(dim)}'",
            value=value,
            expected=dim.unit,
        )
    number = float(match.group(1))
    unit_text = match.group(2)
    if not unit_text:
        return _bare(number, value, dim)
    unit_text = _SPELLINGS.get(unit_text, unit_text)
    unit_text = _POWER.sub(r"**\1", unit_text)
    ureg = registry()
    try:
        quantity = ureg.Quantity(number, unit_text)
        converted = quantity.to(dim.unit)
    except pint.errors.DimensionalityError as exc:
        raise QuantityError(
            f"'{value}' is not a {dim.name} (expected a unit like {dim.unit})",
            value=value,
            expected=dim.unit,
        ) from exc
    except Exception as exc:  # noqa: BLE001
        # pint's unit parser fails on odd text in many ways (UndefinedUnitError, TokenError on
        # "V)", IndexError, KeyError, ...): found by fuzzing; every one is "not a unit we know".
        raise QuantityError(
            f"'{value}' has a unit ohmtrail does not know ('{match.group(2)}')",
            value=value,
            expected=dim.unit,
        ) from exc
    result = float(converted.magnitude)
    if not math.isfinite(result):
        raise QuantityError(f"'{value}' is not a finite {dim.name}", value=value)
    return result


def _bare(number: float, value: Any, dim: Dimension) -> float:
    if dim.bare_limit is not None and abs(number) > dim.bare_limit:
        raise QuantityError(
            f"'{value}' needs its unit, e.g. '{_example(dim)}'", value=value, expected=dim.unit
        )
    return number


def _example(dim: Dimension) -> str:
    return {
        "voltage": "12.6 V",
        "resistance": "2.2 kohm",
        "current": "1.75 A",
        "power": "21 W",
        "length": "1.2 m",
        "cross-section": "1.5 mm2",
        "time": "3 min",
        "temperature": "20 degC",
        "fraction": "5 %",
    }[dim.name]


def _field_type(dim: Dimension, description: str) -> Any:
    def validate(value: Any) -> float:
        try:
            return parse_quantity(value, dim)
        except QuantityError as exc:
            # pydantic turns ValueError into a validation error at the field's location.
            raise ValueError(str(exc)) from exc

    schema = {
        "anyOf": [{"type": "number"}, {"type": "string"}],
        "description": f"{description}; a number in {dim.unit} or a text like '{_example(dim)}'",
    }
    return Annotated[
        float,
        BeforeValidator(validate),
        PlainSerializer(lambda v: v, return_type=float),
        WithJsonSchema(schema),
    ]


if TYPE_CHECKING:  # to the type checker each is the float it holds once validated
    Volts: TypeAlias = float
    Ohms: TypeAlias = float
    Amperes: TypeAlias = float
    Watts: TypeAlias = float
    Metres: TypeAlias = float
    SquareMetres: TypeAlias = float
    Minutes: TypeAlias = float
    Celsius: TypeAlias = float
    Fraction: TypeAlias = float
else:
    Volts = _field_type(VOLTAGE, "voltage")
    Ohms = _field_type(RESISTANCE, "resistance")
    Amperes = _field_type(CURRENT, "current")
    Watts = _field_type(POWER, "power")
    Metres = _field_type(LENGTH, "length")
    SquareMetres = _field_type(AREA, "conductor cross-section, or an AWG size like '18 AWG'")
    Minutes = _field_type(TIME_MINUTES, "time in minutes")
    Celsius = _field_type(TEMPERATURE, "temperature in degrees Celsius")
    Fraction = _field_type(FRACTION, "a fraction (0.05) or a percentage ('5 %')")
