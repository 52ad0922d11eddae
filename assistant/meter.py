"""The multimeter: an editable profile of ranges and accuracy, and what it displays.

A profile (YAML, like a ruleset; the default is ``assistant/data/meter_default.yaml``, a
2000-count auto-ranging handheld) gives, per function, the ranges, the accuracy written
±(% of reading + counts), and what the meter does to the circuit: the DC volts input
resistance, the test leads' resistance on ohms, the shunt burden of each current range.

:func:`show` turns true values into displays: the meter picks the lowest range that holds the
value (auto-ranging), rounds to that range's resolution, and shows OL (``±inf``) above its top
range. The standard uncertainty of a display is its accuracy bound divided by sqrt(3) (a
rectangular bound, JCGM 100:2008). :func:`meter_setup` says how to set the meter up for a test,
as plain text for the prompt and the report.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from functools import lru_cache
from importlib import resources
from pathlib import Path
from typing import Any, Literal

import numpy as np
from pydantic import BaseModel, ConfigDict, Field, ValidationError, field_validator, model_validator

from assistant.errors import MeterProfileError, RulesetError
from assistant.predict import TestInfo
from assistant.ruleset.load import Locator, parse_yaml, read_text, to_plain, validation_problems
from assistant.ruleset.quantities import Amperes, Ohms, Volts

Jack = Literal["mA", "10A", "clamp"]
SQRT3 = math.sqrt(3.0)


class _Frozen(BaseModel):
    model_config = ConfigDict(frozen=True, extra="forbid")


def _span_shorthand(value: Any) -> Any:
    # `20 V` in a range list means `{full_scale: 20 V}`
    return value if isinstance(value, dict) else {"full_scale": value}


class Accuracy(_Frozen):
    """±(percent of reading + counts of the range's resolution)."""

    percent: float = Field(ge=0, le=50)
    counts: float = Field(ge=0, le=1000)


class VoltRange(_Frozen):
    full_scale: Volts = Field(gt=0)
    resolution: Volts | None = Field(default=None, gt=0, description="default: full_scale / counts")


class OhmRange(_Frozen):
    full_scale: Ohms = Field(gt=0)
    resolution: Ohms | None = Field(default=None, gt=0)


class AmpRange(_Frozen):
    full_scale: Amperes = Field(gt=0)
    resolution: Amperes | None = Field(default=None, gt=0)
    burden: Ohms = Field(default=0.0, ge=0, description="shunt and fuse resistance the meter puts in series")


def _ascending(ranges: tuple[Any, ...]) -> tuple[Any, ...]:
    scales = [r.full_scale for r in ranges]
    if scales != sorted(scales) or len(set(scales)) != len(scales):
        raise ValueError("ranges must be listed from the lowest to the highest")
    return ranges


class _Ranged(_Frozen):
    """A meter function with ranges, listed lowest first; a range may be written as its span alone."""

    @field_validator("ranges", mode="before", check_fields=False)
    @classmethod
    def _short(cls, value: Any) -> Any:
        return [_span_shorthand(v) for v in value] if isinstance(value, list) else value

    @field_validator("ranges", check_fields=False)
    @classmethod
    def _ordered(cls, value: tuple[Any, ...]) -> tuple[Any, ...]:
        return _ascending(value)


class DcVolts(_Ranged):
    input_resistance: Ohms = Field(default=10e6, gt=0)
    accuracy: Accuracy
    ranges: tuple[VoltRange, ...] = Field(min_length=1)


class Resistance(_Ranged):
    lead_resistance: Ohms = Field(default=0.2, ge=0, description="both test leads, added to every reading")
    accuracy: Accuracy
    ranges: tuple[OhmRange, ...] = Field(min_length=1)


class CurrentJack(_Frozen):
    ranges: tuple[AmpRange, ...] = Field(min_length=1)
    fuse: Amperes | None = Field(default=None, gt=0, description="rating of the jack's own fuse")

    @field_validator("ranges")
    @classmethod
    def _ordered(cls, value: tuple[Any, ...]) -> tuple[Any, ...]:
        return _ascending(value)


class DcAmps(_Frozen):
    accuracy: Accuracy
    jacks: dict[Literal["mA", "10A"], CurrentJack] = Field(min_length=1)


class Clamp(_Ranged):
    accuracy: Accuracy
    ranges: tuple[AmpRange, ...] = Field(min_length=1)


class MeterProfile(_Frozen):
    """A multimeter as the predictions see it."""

    name: str
    counts: int = Field(default=2000, ge=100, le=1_000_000, description="display counts, e.g. 2000 (shows up to 1999)")
    dc_volts: DcVolts
    ohms: Resistance
    dc_amps: DcAmps
    clamp: Clamp | None = None

    @model_validator(mode="after")
    def _clamp_above(self) -> MeterProfile:
        if "10A" not in self.dc_amps.jacks and "mA" not in self.dc_amps.jacks:
            raise ValueError("dc_amps needs a 'mA' or a '10A' jack")
        return self


@dataclass(frozen=True)
class Scale:
    """One range as the display uses it."""

    full_scale: float
    resolution: float
    limit: float  # the largest value shown before OL
    burden: float = 0.0

    @property
    def decimals(self) -> int:
        return max(0, -math.floor(math.log10(self.resolution) + 1e-9)) + 1


def scales(ranges: tuple[Any, ...], counts: int) -> tuple[Scale, ...]:
    """The display scales of a function's ranges."""
    out = []
    for r in ranges:
        resolution = r.resolution or r.full_scale / counts
        limit = min((counts - 1) * resolution, r.full_scale)
        out.append(Scale(r.full_scale, resolution, limit, float(getattr(r, "burden", 0.0))))
    return tuple(out)


@dataclass(frozen=True, eq=False)
class Display:
    """What the meter shows for each variant, its standard uncertainty, and the step in use."""

    samples: np.ndarray  # ±inf for OL
    sigma: np.ndarray
    resolution: np.ndarray
    scale: np.ndarray  # index of the range in use


def show(values: np.ndarray, ranges: tuple[Scale, ...], accuracy: Accuracy) -> Display:
    """Auto-range, quantise and mark OL; the uncertainty from the accuracy bound / sqrt(3)."""
    values = np.asarray(values, dtype=float)
    magnitude = np.abs(values)
    chosen = np.full(values.shape, len(ranges), dtype=int)
    for i in reversed(range(len(ranges))):
        chosen = np.where(magnitude <= ranges[i].limit, i, chosen)
    samples = np.empty(values.shape)
    sigma = np.empty(values.shape)
    resolution = np.empty(values.shape)
    for i, sc in enumerate(ranges):
        sel = chosen == i
        shown = np.round(np.round(values[sel] / sc.resolution) * sc.resolution, sc.decimals) + 0.0
        samples[sel] = shown
        resolution[sel] = sc.resolution
        sigma[sel] = (accuracy.percent / 100.0 * np.abs(shown) + accuracy.counts * sc.resolution) / SQRT3
    over = chosen == len(ranges)
    top = ranges[-1]
    samples[over] = np.where(values[over] < 0, -np.inf, np.inf)
    resolution[over] = top.resolution
    sigma[over] = (accuracy.percent / 100.0 * top.limit + accuracy.counts * top.resolution) / SQRT3
    return Display(samples, sigma, resolution, chosen)


# A module's live data of one of its own inputs, read on a scan tool: a 10-bit converter on the
# module's 5 V reference resolves about 5 mV and live data shows two decimals; the reading is
# good to about 1 % and 2 digits, and an input above the converter's span shows its top, 5.00 V
# (all from memory: take the figures of your module and scan tool).
SCAN_TOOL_SPAN = 5.0
SCAN_TOOL_SCALES = (Scale(SCAN_TOOL_SPAN, 0.01, SCAN_TOOL_SPAN),)
SCAN_TOOL_ACCURACY = Accuracy(percent=1.0, counts=2)


def scan_tool_display(values: np.ndarray) -> Display:
    """What a module reports of the voltages ``values`` at its input: clipped to its span."""
    return show(np.clip(np.asarray(values, dtype=float), 0.0, SCAN_TOOL_SPAN), SCAN_TOOL_SCALES, SCAN_TOOL_ACCURACY)


def volts_scales(profile: MeterProfile) -> tuple[Scale, ...]:
    return scales(profile.dc_volts.ranges, profile.counts)


def ohms_scales(profile: MeterProfile) -> tuple[Scale, ...]:
    return scales(profile.ohms.ranges, profile.counts)


def jack_scales(profile: MeterProfile, jack: Jack) -> tuple[Scale, ...]:
    """The ranges of a current jack, or of the clamp."""
    if jack == "clamp":
        if profile.clamp is None:
            raise MeterProfileError(f"meter '{profile.name}' has no DC clamp for currents above its jacks")
        return scales(profile.clamp.ranges, profile.counts)
    found = profile.dc_amps.jacks.get(jack)
    if found is None:
        raise MeterProfileError(f"meter '{profile.name}' has no '{jack}' current jack")
    return scales(found.ranges, profile.counts)


def current_accuracy(profile: MeterProfile, jack: Jack) -> Accuracy:
    if jack == "clamp" and profile.clamp is not None:
        return profile.clamp.accuracy
    return profile.dc_amps.accuracy


def choose_jack(profile: MeterProfile, expected_amps: float | None, requested: str = "auto") -> Jack:
    """Where the red lead goes for a current test: as the test asks, or by the expected current.

    Auto: the mA jack when the expected current sits well inside it (80 % of its top range), the
    fused 10 A jack up to its rating or when nothing is known, a DC clamp above that (never
    crank or run a large load through the meter's jack).
    """
    if requested in ("mA", "10A", "clamp"):
        return requested  # type: ignore[return-value]
    jacks = profile.dc_amps.jacks
    amps = None if expected_amps is None or not math.isfinite(expected_amps) else abs(expected_amps)
    if amps is not None and "mA" in jacks and amps <= 0.8 * scales(jacks["mA"].ranges, profile.counts)[-1].limit:
        return "mA"
    if "10A" in jacks and (amps is None or amps <= scales(jacks["10A"].ranges, profile.counts)[-1].limit):
        return "10A"
    if profile.clamp is not None:
        return "clamp"
    return "10A" if "10A" in jacks else "mA"


# --------------------------------------------------------------------------- loading


def load_meter_profile(path: str | Path) -> MeterProfile:
    """Read a meter profile; any bad value is a MeterProfileError at its file, line and column."""
    name = str(path)
    try:
        _, text = read_text(Path(path), MeterProfileError)  # type: ignore[arg-type]
        tree = parse_yaml(text, name, MeterProfileError)  # type: ignore[arg-type]
        locator = Locator(name, tree)
        plain = to_plain(tree, locator)
    except RulesetError as exc:
        raise MeterProfileError.from_problems(exc.problems) from exc
    if not isinstance(plain, dict):
        raise MeterProfileError("a meter profile is a YAML mapping (keys like 'name:' and 'dc_volts:')",
                                file=name, line=1, column=1)
    try:
        return MeterProfile.model_validate(plain)
    except ValidationError as exc:
        raise MeterProfileError.from_problems(validation_problems(exc, locator)) from exc


@lru_cache(maxsize=1)
def default_meter() -> MeterProfile:
    """The bundled profile: a 2000-count auto-ranging handheld."""
    ref = resources.files("assistant") / "data" / "meter_default.yaml"
    with resources.as_file(ref) as path:
        return load_meter_profile(path)


# --------------------------------------------------------------------------- set-up text


@dataclass(frozen=True)
class MeterSetup:
    """How to set the meter up for one test, in words."""

    function: str
    range: str
    red_lead: str
    black_lead: str
    note: str | None = None


def meter_setup(test: TestInfo, profile: MeterProfile, expected_value: float | None) -> MeterSetup:
    """Function, range, where each lead goes, for one test and the value expected."""
    red_at, black_at = (tuple(test.points) + (None, None))[:2]
    known = expected_value is not None and math.isfinite(expected_value)
    if test.instrument == "scan_tool":
        return MeterSetup("scan tool, live data", f"0 to {SCAN_TOOL_SPAN:g} V, shown to 0.01 V",
                          "no meter leads", "no meter leads",
                          f"read the voltage the module reports for {red_at}; a value above its span shows "
                          f"{SCAN_TOOL_SPAN:.2f} V")
    if test.kind in ("voltage", "drop", "fuse_drop"):
        rng = _range_text(volts_scales(profile), expected_value, "V") if known else "auto"
        note = ("across the fuse in place, through its test slots: millivolts mean current flows"
                if test.kind == "fuse_drop" else
                "with the circuit working under its load" if test.kind == "drop" else None)
        return MeterSetup("DC volts", rng, _lead("V/ohm jack", red_at), _lead("COM jack", black_at or "ground"), note)
    if test.kind == "resistance":
        rng = _range_text(ohms_scales(profile), expected_value, "ohm") if known else "auto"
        return MeterSetup("ohms", rng, _lead("V/ohm jack", red_at), _lead("COM jack", black_at),
                          f"power off and the part isolated first; the expected value includes "
                          f"{profile.ohms.lead_resistance:g} ohm of test leads (touch them together to see yours)")
    if test.kind == "current":
        jack = choose_jack(profile, expected_value, test.jack)
        rng = _range_text(jack_scales(profile, jack), expected_value, "A") if known else "auto"
        where = f" of {red_at}" if red_at else ""
        if jack == "clamp":
            return MeterSetup("DC amps (clamp)", rng, f"clamp around the single wire{where}", "no black lead",
                              "zero the clamp before closing it around the wire")
        label = "fused 10 A jack" if jack == "10A" else "mA jack"
        return MeterSetup("DC amps", rng, _lead(label, f"the supply side of the break{where}"),
                          _lead("COM jack", "the part's side of the break"),
                          "in series only; move the red lead back to the V jack afterwards; never crank or switch "
                          "a large load through the jack")
    if test.kind == "observation":
        return MeterSetup("none (look and answer)", "-", "-", "-")
    raise ValueError(f"unknown test kind '{test.kind}'")


def _lead(jack: str, point: str | None) -> str:
    return f"{jack}, probe on {point}" if point else jack


def _range_text(ranges: tuple[Scale, ...], value: float | None, unit: str) -> str:
    magnitude = abs(value) if value is not None else 0.0
    for sc in ranges:
        if magnitude <= sc.limit:
            return f"{format_quantity(sc.full_scale, unit)} (auto-ranging)"
    return f"above {format_quantity(ranges[-1].full_scale, unit)}: expect OL"


def format_quantity(value: float, unit: str) -> str:
    """A value with an SI prefix: 0.2 V -> '200 mV', 20000 ohm -> '20 kohm'."""
    if value == 0 or not math.isfinite(value):
        return f"{value:g} {unit}"
    for factor, prefix in ((1e6, "M"), (1e3, "k"), (1.0, ""), (1e-3, "m"), (1e-6, "µ")):
        if abs(value) >= factor * 0.9999:
            return f"{value / factor:g} {prefix}{unit}"
    return f"{value:g} {unit}"
