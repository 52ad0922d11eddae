"""The meter profile: the default handheld's figures, display rules, located errors, set-up text."""

from __future__ import annotations

import math
from pathlib import Path

import numpy as np
import pytest

from assistant.errors import MeterProfileError
from assistant.meter import (
    choose_jack,
    default_meter,
    format_quantity,
    load_meter_profile,
    meter_setup,
    ohms_scales,
    show,
    volts_scales,
)
from assistant.predict import TestInfo as Info


def test_default_profile_is_the_issue_handheld() -> None:
    # typical 2000-count handheld (from memory): DC V 10 MOhm, ±(0.5 % + 2); DC A ±(1.5 % + 3);
    # ohms ±(0.8 % + 3) with 0.2 ohm leads
    m = default_meter()
    assert m.counts == 2000
    assert m.dc_volts.input_resistance == 10e6
    assert (m.dc_volts.accuracy.percent, m.dc_volts.accuracy.counts) == (0.5, 2)
    assert (m.dc_amps.accuracy.percent, m.dc_amps.accuracy.counts) == (1.5, 3)
    assert (m.ohms.accuracy.percent, m.ohms.accuracy.counts) == (0.8, 3)
    assert m.ohms.lead_resistance == 0.2
    assert all(r.burden > 0 for jack in m.dc_amps.jacks.values() for r in jack.ranges)


def test_accuracy_bound_of_12_60_volts() -> None:
    # FACTS [D]: 12.60 V on the 20 V range (10 mV a count) at ±(0.5 % + 2) is ±0.083 V;
    # the standard uncertainty is the bound / sqrt(3) (JCGM 100:2008)
    m = default_meter()
    d = show(np.array([12.60]), volts_scales(m), m.dc_volts.accuracy)
    assert d.resolution[0] == pytest.approx(0.01)
    assert d.sigma[0] * math.sqrt(3) == pytest.approx(0.083, abs=1e-9)


def test_auto_ranging_quantising_and_ol() -> None:
    m = default_meter()
    d = show(np.array([0.1234567, 1.98, 12.456, -3.0, 250.0, 601.0, np.inf]), volts_scales(m), m.dc_volts.accuracy)
    assert list(d.samples[:6]) == [0.1235, 1.98, 12.46, -3.0, 250.0, np.inf]
    assert d.samples[6] == np.inf
    assert list(d.resolution[:5]) == pytest.approx([1e-4, 1e-3, 1e-2, 1e-2, 1.0])
    # 1999 counts is the most a 2000-count range shows: 1.9995 V goes to the 20 V range
    assert show(np.array([1.9995]), volts_scales(m), m.dc_volts.accuracy).resolution[0] == pytest.approx(0.01)
    # ohms: an open circuit is OL
    assert show(np.array([np.inf, 0.77]), ohms_scales(m), m.ohms.accuracy).samples.tolist() == [np.inf, 0.8]


def _profile(tmp_path: Path, text: str) -> Path:
    path = tmp_path / "meter.yaml"
    path.write_text(text)
    return path


GOOD = (Path(__file__).resolve().parents[1] / "assistant" / "data" / "meter_default.yaml").read_text()


def test_the_bundled_file_loads_as_the_default() -> None:
    assert load_meter_profile(Path(__file__).resolve().parents[1] / "assistant" / "data" /
                              "meter_default.yaml") == default_meter()


@pytest.mark.parametrize(
    "old,new,line,needle",
    [
        # a negative input resistance, at its own line
        ("input_resistance: 10 Mohm", "input_resistance: -5 Mohm", 8, "input_resistance"),
        # a current where a voltage range belongs
        ("ranges: [200 mV, 2 V", "ranges: [200 mA, 2 V", 10, "voltage"),
        # ranges out of order
        ("ranges: [200 ohm, 2 kohm", "ranges: [2 kohm, 200 ohm", 15, "lowest to the highest"),
        # a field the format does not have
        ("counts: 2000 ", "countz: 2000 ", 5, "unknown field"),
    ],
)
def test_bad_values_are_located(tmp_path: Path, old: str, new: str, line: int, needle: str) -> None:
    assert old in GOOD
    path = _profile(tmp_path, GOOD.replace(old, new))
    with pytest.raises(MeterProfileError) as err:
        load_meter_profile(path)
    assert err.value.file == str(path)
    assert err.value.line == line
    assert needle in str(err.value)
    assert str(err.value).startswith(f"{path}:{line}:")


def test_unreadable_profiles(tmp_path: Path) -> None:
    with pytest.raises(MeterProfileError, match="no such file"):
        load_meter_profile(tmp_path / "missing.yaml")
    with pytest.raises(MeterProfileError, match="is empty"):
        load_meter_profile(_profile(tmp_path, "\n"))
    with pytest.raises(MeterProfileError, match="YAML"):
        load_meter_profile(_profile(tmp_path, "name: [unclosed\n"))
    with pytest.raises(MeterProfileError, match="mapping"):
        load_meter_profile(_profile(tmp_path, "- a list\n"))


def test_jack_choice() -> None:
    m = default_meter()
    assert choose_jack(m, 0.030) == "mA"  # a sleep draw
    assert choose_jack(m, 1.75) == "10A"  # a stop lamp
    assert choose_jack(m, None) == "10A"  # unknown: start on the fused 10 A jack
    assert choose_jack(m, 150.0) == "clamp"  # cranking-size currents never go through a jack
    assert choose_jack(m, 1.75, "clamp") == "clamp"


def test_meter_setup_text_for_each_kind() -> None:
    m = default_meter()
    v = meter_setup(Info("v", "voltage", "V", 2.0, "on", points=("SW_OUT", "GND")), m, 12.4)
    assert v.function == "DC volts" and v.range.startswith("20 V")
    assert "SW_OUT" in v.red_lead and "V/ohm" in v.red_lead and "COM" in v.black_lead and "GND" in v.black_lead
    fd = meter_setup(Info("fd", "fuse_drop", "V", 2.0, "off", points=("P", "F")), m, 0.0003)
    assert fd.range.startswith("200 mV")
    r = meter_setup(Info("r", "resistance", "ohm", 4.0, None, points=("A", "B")), m, 0.8)
    assert r.function == "ohms" and "power off" in (r.note or "")
    i = meter_setup(Info("i", "current", "A", 6.0, "on", points=("lamp",)), m, 1.75)
    assert "10 A" in i.red_lead and "series" in (i.note or "")
    small = meter_setup(Info("i", "current", "A", 6.0, "on", points=("ecu",)), m, 0.03)
    assert "mA jack" in small.red_lead
    big = meter_setup(Info("i", "current", "A", 6.0, "crank", points=("starter",)), m, 150.0)
    assert "clamp" in big.function and "clamp" in big.red_lead
    obs = meter_setup(Info("o", "observation", "", 1.0, None, ("yes", "no")), m, None)
    assert obs.function.startswith("none")


def test_format_quantity() -> None:
    assert format_quantity(0.2, "V") == "200 mV"
    assert format_quantity(20e3, "ohm") == "20 kohm"
    assert format_quantity(10.0, "A") == "10 A"
