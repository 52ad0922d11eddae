"""The reading parser: what a technician types at the vehicle, into SI values, OL or outcomes."""

from __future__ import annotations

import math

import pytest

from assistant.errors import ReadingError
from assistant.predict import TestInfo as Info
from assistant.reading import Reading, parse_reading

VOLTS = Info("v_feed", "voltage", "V", 2.0, "pedal_pressed")
DROP = Info("drop_gnd", "drop", "V", 3.0, "pedal_pressed")
OHMS = Info("r_lamp", "resistance", "ohm", 4.0, None)
AMPS = Info("i_lamp", "current", "A", 6.0, "pedal_pressed")
LOOK = Info("look_fuse", "observation", "", 2.0, None, ("yes", "no"))
COLOUR = Info("look_colour", "observation", "", 2.0, None, ("green", "grey", "gone"))


@pytest.mark.parametrize(
    ("text", "test", "volts_ohms_amps"),
    [
        ("11.8", VOLTS, 11.8),  # a bare number is in the test's unit
        ("11.8 V", VOLTS, 11.8),
        ("11.8V", VOLTS, 11.8),  # no space
        ("12.4 v", VOLTS, 12.4),  # lower-case unit as typed on a phone
        ("118 mV", VOLTS, 0.118),  # milli: SI prefix
        ("118 m", VOLTS, 0.118),  # the prefix alone means the test's unit
        ("-0.03", DROP, -0.03),  # leads reversed on a drop test
        ("+0.25", DROP, 0.25),
        ("11,8", VOLTS, 11.8),  # decimal comma
        ("6.5 kohm", OHMS, 6500.0),
        ("6.5k", OHMS, 6500.0),
        ("6.5 K", OHMS, 6500.0),
        ("6k5", OHMS, 6500.0),  # the letter as the decimal point (resistor-code style)
        ("4R7", OHMS, 4.7),
        ("1.2 kΩ", OHMS, 1200.0),
        ("5 Ω", OHMS, 5.0),
        ("0.7 ohms", OHMS, 0.7),
        ("2 Mohm", OHMS, 2.0e6),  # capital M: mega
        ("20 mohm", OHMS, 0.020),  # small m: milli
        ("420 mA", AMPS, 0.42),
        ("1.75 A", AMPS, 1.75),
        ("3A5", AMPS, 3.5),
        ("1e-3 A", AMPS, 0.001),
    ],
)
def test_values_are_si_floats(text: str, test: Info, volts_ohms_amps: float) -> None:
    reading = parse_reading(text, test)
    assert reading.value == pytest.approx(volts_ohms_amps, rel=1e-12)
    assert not reading.overload and reading.outcome is None
    assert reading.text == text


def test_typed_digits_are_kept_exactly() -> None:
    # 118 mV is stored as 0.118, not as the float product 0.11800000000000001.
    assert parse_reading("118 mV", VOLTS).value == 0.118


@pytest.mark.parametrize("text", ["OL", "ol", "O.L", "O.L.", "-OL", "0L", "overload"])
def test_overload_spellings(text: str) -> None:
    assert parse_reading(text, OHMS) == Reading(text="OL", overload=True)


@pytest.mark.parametrize(
    ("text", "test", "outcome"),
    [
        ("yes", LOOK, "yes"),
        ("YES", LOOK, "yes"),
        ("y", LOOK, "yes"),  # a unique prefix
        ("n", LOOK, "no"),
        ("green", COLOUR, "green"),
        ("gree", COLOUR, "green"),
        ("gone", COLOUR, "gone"),
    ],
)
def test_observation_outcomes(text: str, test: Info, outcome: str) -> None:
    assert parse_reading(text, test) == Reading(text=outcome, outcome=outcome)


@pytest.mark.parametrize(
    ("text", "test", "says"),
    [
        ("12 ohm", VOLTS, "is not a voltage"),  # wrong dimension
        ("12 V", OHMS, "is not a resistance"),
        ("2 A", VOLTS, "is not a voltage"),
        ("0.4 V", AMPS, "is not a current"),
        ("6k5V", OHMS, "is not a resistance"),  # kilovolts typed for ohms
        ("4R7V", OHMS, "mixes two ways"),
        ("12 parsecs", VOLTS, "is not a voltage"),
        ("abc", VOLTS, "is not a reading"),
        ("12.4.4", VOLTS, "is not a"),
        ("", VOLTS, "nothing was typed"),
        ("   ", OHMS, "nothing was typed"),
        ("1e999", VOLTS, "not a finite number"),
        ("nan", VOLTS, "is not a reading"),
        ("maybe", LOOK, "answer one of: yes, no"),
        ("g", COLOUR, "could be any of green, grey, gone"),
        ("12", LOOK, "answer one of"),
    ],
)
def test_bad_input_is_one_line(text: str, test: Info, says: str) -> None:
    with pytest.raises(ReadingError) as caught:
        parse_reading(text, test)
    message = str(caught.value)
    assert says in message
    assert "\n" not in message


def test_error_shows_the_unit_to_use() -> None:
    with pytest.raises(ReadingError, match=r"reads a voltage in V, e\.g\. 11\.8"):
        parse_reading("12 ohm", VOLTS)


def test_values_are_finite() -> None:
    for text in ("0", "0.0 V", "-12.65", "1e-9 V"):
        value = parse_reading(text, VOLTS).value
        assert value is not None and math.isfinite(value)
