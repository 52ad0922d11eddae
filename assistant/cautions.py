"""The safety cautions a test page carries, in one place so that the prompt and the report agree.

Which cautions apply follows from what the meter is asked to do: current in series needs the
fused jack, resistance needs a dead circuit and never an airbag circuit, a cranking state
needs fuel and ignition disabled. Two apply to every page: high-voltage systems are out of
scope, and the maker's procedures, local codes and licensed practice come first. The texts are
the trade's common practice (see the safety section of README.md).
"""

from __future__ import annotations

from collections.abc import Iterable
from typing import Any

from assistant.ruleset.model import Ruleset

METER_JACK = ("Current is measured in series only, with the red lead in the meter's fused current jack; "
              "move the red lead back to the V jack afterwards.")
NO_CRANK_THROUGH_JACK = ("Never crank the engine or switch on a large load through the meter's current jack; "
                         "use a DC clamp for starter and other high currents.")
DE_ENERGISE = ("Never measure resistance on a powered circuit: switch off, pull the fuse or disconnect the "
               "part, and isolate what you measure.")
NO_OHMMETER_ON_AIRBAGS = "Do not probe airbag or other pyrotechnic circuits with an ohmmeter."
CRANKING = ("Before cranking, disable fuel and ignition as the maker describes; keep hands, leads and "
            "clothing clear of moving parts.")
HIGH_VOLTAGE = ("Hybrid and electric vehicles: orange high-voltage cabling is out of scope without training, "
                "a CAT III 1000 V rated meter and leads, and insulated gloves.")
MAKER_FIRST = ("Follow the vehicle maker's procedures, local codes and licensed practice; where they differ "
               "from this advice, they win.")

EVERY_PAGE: tuple[str, ...] = (HIGH_VOLTAGE, MAKER_FIRST)
BY_KIND: dict[str, tuple[str, ...]] = {
    "current": (METER_JACK, NO_CRANK_THROUGH_JACK),
    "resistance": (DE_ENERGISE, NO_OHMMETER_ON_AIRBAGS),
}
ALL: tuple[str, ...] = (METER_JACK, NO_CRANK_THROUGH_JACK, DE_ENERGISE, NO_OHMMETER_ON_AIRBAGS, CRANKING,
                        HIGH_VOLTAGE, MAKER_FIRST)


def is_cranking(state_id: str | None, ruleset: Ruleset) -> bool:
    """Whether an operating state turns the engine over (by its id or its label)."""
    if state_id is None:
        return False
    state = ruleset.states.get(state_id)
    words = f"{state_id} {state.label if state else ''}".lower()
    return "crank" in words or "starting" in words


def cautions_for(ruleset: Ruleset, test: Any, extra: Iterable[str] = ()) -> tuple[str, ...]:
    """Every caution for one test of ``ruleset``, most specific first, each once.

    The order: what the measurement kind needs, a cranking state, the test's own, its
    preparations', its state's,
    the ruleset's, ``extra`` (cautions decision rules raised), then the two for every page.
    """
    found: list[str] = list(BY_KIND.get(test.kind, ()))
    if is_cranking(test.state, ruleset):
        found.append(CRANKING)
    found.extend(test.cautions)
    for ref in getattr(test, "prepare", ()):
        prep = ruleset.preparations.get(ref)
        if prep is not None:
            found.extend(prep.cautions)
    state = ruleset.states.get(test.state) if test.state else None
    if state is not None:
        found.extend(state.cautions)
    found.extend(ruleset.cautions)
    found.extend(extra)
    found.extend(EVERY_PAGE)
    return tuple(dict.fromkeys(text.strip() for text in found if text and text.strip()))


def session_cautions(ruleset: Ruleset, extra: Iterable[str] = ()) -> tuple[str, ...]:
    """The cautions of a whole session: every one that applies to any of its tests, each once."""
    found: list[str] = []
    for test in ruleset.tests:
        found.extend(t for t in cautions_for(ruleset, test, extra) if t not in EVERY_PAGE)
    return tuple(dict.fromkeys(found)) + EVERY_PAGE
