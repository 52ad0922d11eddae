"""Test pages on the bundled rulesets: where, the meter set-up, the cautions that apply, the healthy range."""

from __future__ import annotations

import pytest

from assistant import cautions
from assistant.meter import default_meter
from assistant.page import PageMaker, render_page, verdict
from assistant.predict import predict
from assistant.reading import Reading
from assistant.ruleset.load import load_ruleset
from tests.conftest import RULESETS, STOP_LAMPS


@pytest.fixture(scope="module")
def stop_pages() -> PageMaker:
    loaded = load_ruleset(STOP_LAMPS)
    return PageMaker(loaded, predict(loaded), default_meter())


@pytest.fixture(scope="module")
def starter_pages() -> PageMaker:
    loaded = load_ruleset(RULESETS / "starter" / "starter.yaml")
    return PageMaker(loaded, predict(loaded), default_meter())


def test_every_page_carries_the_general_cautions(stop_pages: PageMaker, starter_pages: PageMaker) -> None:
    for pages in (stop_pages, starter_pages):
        for test in pages.ruleset.tests:
            page = pages.page(test.id)
            assert page.cautions[-2:] == cautions.EVERY_PAGE  # high voltage out of scope; the maker first
            assert len(set(page.cautions)) == len(page.cautions)


def test_resistance_pages_say_de_energise_and_no_airbags(stop_pages: PageMaker) -> None:
    page = stop_pages.page("r_left_lamp")
    assert page.cautions[:2] == (cautions.DE_ENERGISE, cautions.NO_OHMMETER_ON_AIRBAGS)
    assert page.setup[0].startswith("ohms") and "isolated" in page.setup[-1]


def test_current_pages_say_series_and_fused_jack(stop_pages: PageMaker) -> None:
    page = stop_pages.page("i_left")
    assert page.cautions[:2] == (cautions.METER_JACK, cautions.NO_CRANK_THROUGH_JACK)
    assert page.setup[0].startswith("DC amps")


def test_cranking_pages_carry_the_cranking_caution_and_the_states_own(starter_pages: PageMaker) -> None:
    page = starter_pages.page("i_crank")
    assert cautions.CRANKING in page.cautions and cautions.NO_CRANK_THROUGH_JACK in page.cautions
    assert "Crank no more than 10 seconds; let the starter cool a minute between tries." in page.cautions
    assert "Clamp only; a cranking current through the meter's jack blows its fuse or worse." in page.cautions
    assert page.setup[0].startswith("DC amps (clamp)")
    assert page.state is not None and page.state.startswith("cranking, fuel and ignition disabled: ")


def test_a_voltage_page(stop_pages: PageMaker) -> None:
    page = stop_pages.page("v_left_feed")
    assert page.what == "DC voltage at L_FEED (left stop lamp feed), against GND (chassis ground)"
    assert page.where[0] == ("L_FEED: left stop lamp feed (connector L10, pin 2, wire green/white, left rear lamp "
                             "holder); back-probe the holder connector")
    assert page.state == ("pedal pressed: Hold the brake pedal down (a pedal prop or a helper); lamps must be lit "
                          "while you read.")
    assert page.setup[1:3] == ("red lead: V/ohm jack, probe on L_FEED", "black lead: COM jack, probe on GND")
    assert page.cost_minutes == 3.0 and page.access == "remove the left lamp cluster (two screws)"
    # The healthy range is the 5th-95th percentile the predictions give under "none".
    row = stop_pages.summary["none"]["v_left_feed"]
    assert (page.healthy_low, page.healthy_high) == (row["low"], row["high"])
    assert page.healthy_low < page.healthy_high  # type: ignore[operator]
    text = render_page(stop_pages.test_question("v_left_feed"))
    assert "Meter: DC volts, range 20 V" in text and f"Healthy: {page.healthy}" in text


def test_observation_pages(stop_pages: PageMaker) -> None:
    page = stop_pages.page("look_fuse")
    assert page.outcomes == ("yes", "no") and page.expected_outcome == "no" and page.setup == ()
    assert page.what == "Is fuse F12 visibly blown (broken link)?"
    assert verdict(Reading("no", outcome="no"), page) == "in range"  # what a healthy circuit shows
    assert verdict(Reading("yes", outcome="yes"), page) == "not as expected"


@pytest.mark.parametrize(
    ("reading", "says"),
    [
        (Reading("12.12", value=12.12), "in range"),
        (Reading("11.0", value=11.0), "low"),
        (Reading("13.5", value=13.5), "high"),
        (Reading("OL", overload=True), "OL"),
    ],
)
def test_verdicts(stop_pages: PageMaker, reading: Reading, says: str) -> None:
    page = stop_pages.page("v_left_feed")
    if says == "in range":
        reading = Reading("mid", value=(page.healthy_low + page.healthy_high) / 2)  # type: ignore[operator]
    assert verdict(reading, page) == says


def test_a_group_conclusion_closes_as_one_of_its_members(stop_pages: PageMaker) -> None:
    from assistant.diagnosis import Conclusion
    from assistant.page import render_closing

    group = ("lamp_high.high_resistance", "none", "w_high_gnd.high_resistance")
    conclusion = Conclusion("lamp_high.high_resistance", 0.54, "no test can change the answer", (), (), None,
                            group, 0.995)
    text = render_closing(stop_pages.closing(conclusion, None))  # type: ignore[arg-type]
    assert ("No fault found beyond what the tests can resolve: one of lamp_high.high_resistance, none, "
            "w_high_gnd.high_resistance, together 99.5%") in text
    assert "most likely lamp_high.high_resistance, 54.0%" in text
    assert "Diagnosis: lamp_high.high_resistance" not in text  # not one certain part


def test_a_scan_tool_page_asks_for_no_meter_leads() -> None:
    loaded = load_ruleset(RULESETS / "sensor_feed" / "sensor_reference.yaml")
    page = PageMaker(loaded, predict(loaded), default_meter()).page("live_bps")
    assert page.what.startswith("the voltage the module reports at SIG_BPS_M")
    assert page.setup[0].startswith("none; scan tool, live data, 0 to 5 V")
    assert not any("lead:" in line for line in page.setup)
    assert page.healthy is not None and page.healthy.endswith("V")


def test_a_page_whose_state_is_not_defined_names_the_state(stop_pages: PageMaker) -> None:
    # an unlinted ruleset may name a state it does not define: the page names it, no traceback
    from assistant.ruleset.model import Ruleset

    spec = stop_pages.ruleset.tests[0].model_copy(update={"state": "ignition_on"})
    ruleset = Ruleset.model_construct(**{**dict(stop_pages.ruleset), "tests": (spec,) + stop_pages.ruleset.tests[1:]})
    pages = PageMaker(stop_pages.loaded, stop_pages.table, default_meter())
    pages.ruleset = ruleset
    pages._specs = {t.id: t for t in ruleset.tests}
    assert pages.page(spec.id).state == "ignition_on"
