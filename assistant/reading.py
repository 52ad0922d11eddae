"""A reading as the technician gives it: a value with its unit, an OL display, or an outcome."""

from __future__ import annotations

from dataclasses import dataclass


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
