"""Quantity parsing: the trade's spellings to SI floats, and the errors for wrong ones."""

from __future__ import annotations

import math

import pytest

from assistant.errors import QuantityError
from assistant.ruleset.quantities import (
    AREA,
    CURRENT,
    FRACTION,
    LENGTH,
    POWER,
    RESISTANCE,
    TEMPERATURE,
    TIME_MINUTES,
    VOLTAGE,
    awg_area_m2,
    parse_quantity,
)


@pytest.mark.parametrize(
    ("text", "dim", "expected"),
    [
        ("12.6 V", VOLTAGE, 12.6),
        ("118 mV", VOLTAGE, 0.118),  # prefix handled by pint
        ("12.6", VOLTAGE, 12.6),  # a bare number is in the field's unit
        (24, VOLTAGE, 24.0),
        ("2.2 kohm", RESISTANCE, 2200.0),
        ("2.2 kΩ", RESISTANCE, 2200.0),
        ("10 mΩ", RESISTANCE, 0.010),
        ("0.5 ohms", RESISTANCE, 0.5),  # plural spelling
        ("1.75 A", CURRENT, 1.75),
        ("35 mA", CURRENT, 0.035),
        ("21 W", POWER, 21.0),
        ("4.5 m", LENGTH, 4.5),
        ("450 mm", LENGTH, 0.45),
        ("1.5 mm2", AREA, 1.5e-6),  # the trade writes mm2 for mm²
        ("1.5 mm^2", AREA, 1.5e-6),
        (0.75e-6, AREA, 0.75e-6),  # a bare cross-section is in m², as stored
        ("3 min", TIME_MINUTES, 3.0),
        ("90 s", TIME_MINUTES, 1.5),
        ("20 degC", TEMPERATURE, 20.0),
        ("5 %", FRACTION, 0.05),
        (0.05, FRACTION, 0.05),
    ],
)
def test_parses_to_si(text: object, dim: object, expected: float) -> None:
    assert parse_quantity(text, dim) == pytest.approx(expected, rel=1e-12)  # type: ignore[arg-type]


@pytest.mark.parametrize(
    ("gauge", "mm2"),
    [
        # Standard AWG areas in circular mils (18 AWG 1624 cmil, 16 AWG 2583, 14 AWG 4107,
        # 10 AWG 10380), from memory of the ASTM B258 table; 1 cmil = 5.067e-4 mm².
        ("18", 1624 * 5.067e-4),
        ("16", 2583 * 5.067e-4),
        ("14", 4107 * 5.067e-4),
        ("10", 10380 * 5.067e-4),
    ],
)
def test_awg_against_wire_table(gauge: str, mm2: float) -> None:
    assert awg_area_m2(gauge) * 1e6 == pytest.approx(mm2, rel=2e-3)
    assert parse_quantity(f"{gauge} AWG", AREA) == pytest.approx(awg_area_m2(gauge))


def test_awg_resistance_matches_floyd_table() -> None:
    # Floyd, Electric Circuit Fundamentals, wire table: 18 AWG solid copper 20.9 mΩ/m at 20 °C
    # (FACTS.md [S]); resistivity 1.7241e-8 Ω·m, International Annealed Copper Standard [S].
    ohm_per_m = 1.7241e-8 / parse_quantity("18 AWG", AREA)
    assert ohm_per_m * 1e3 == pytest.approx(20.9, rel=0.01)


@pytest.mark.parametrize(
    ("value", "dim", "fragment"),
    [
        ("twelve", VOLTAGE, "is not a voltage"),
        ("12 ohm", VOLTAGE, "is not a voltage"),
        ("12 V", AREA, "is not a cross-section"),
        ("12 bananas", VOLTAGE, "does not know"),
        (True, VOLTAGE, "expected a voltage"),
        ([1, 2], VOLTAGE, "expected a voltage"),
        (math.inf, VOLTAGE, "finite"),
        (1.5, AREA, "needs its unit"),  # 1.5 m² of copper is surely 1.5 mm2 meant
        ("1.5", AREA, "needs its unit"),
    ],
)
def test_rejects_wrong_quantities(value: object, dim: object, fragment: str) -> None:
    with pytest.raises(QuantityError, match=fragment):
        parse_quantity(value, dim)  # type: ignore[arg-type]
