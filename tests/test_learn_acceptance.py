"""Acceptance of issue 8: thirty repairs of one fault raise its prior, and the simulated
diagnoses with the learned overlay spend fewer minutes on that fault than without it."""

from __future__ import annotations

import shutil
from collections.abc import Iterator
from pathlib import Path

import pytest

from assistant.cli import main
from assistant.coverage import isolation_minutes
from assistant.diagnosis import Context
from assistant.history import HEADER
from assistant.overlay import apply_priors
from assistant.predict import predict
from assistant.ruleset import load_ruleset
from assistant.simulate import draw_reading


STOP_LAMPS = Path("rulesets/lamp/stop_lamps.yaml")
FAULT = "lamp_left.high_resistance"  # corroded holder contacts: a dim left stop lamp


@pytest.fixture(scope="module", autouse=True)
def _own_cache(tmp_path_factory: pytest.TempPathFactory) -> Iterator[None]:
    with pytest.MonkeyPatch.context() as mp:
        mp.setenv("OHMTRAIL_CACHE", str(tmp_path_factory.mktemp("cache")))
        yield


def _minutes_on(loaded, fault: str, runs: int = 30) -> tuple[float, float]:  # type: ignore[no-untyped-def]
    """(prior, mean minutes of simulated diagnoses under ``fault``), as ``ohmtrail simulate`` runs
    them (no complaint, readings drawn by ``assistant.simulate.draw_reading``), for this fault only."""
    table = apply_priors(predict(loaded), loaded.ruleset)
    h = table.hypothesis_index(fault)
    # the same seed for both rulesets: the same vehicles, and each test reads the same on a
    # vehicle whenever it is asked, so the difference is the priors'
    minutes, _right, _asked = isolation_minutes(loaded, table, h, runs, 3, draw_reading, Context())
    return table.hypotheses[h].prior, minutes


def test_thirty_repairs_make_that_fault_quicker_to_find(tmp_path: Path,
                                                        capsys: pytest.CaptureFixture[str]) -> None:
    ruleset = tmp_path / "rulesets" / "lamp" / "stop_lamps.yaml"
    ruleset.parent.mkdir(parents=True)
    shutil.copy(STOP_LAMPS, ruleset)
    history = tmp_path / "repairs.csv"
    history.write_text(HEADER + "\n" + "".join(
        f"2026-{1 + i % 12:02d}-{1 + i % 28:02d},CV2-{i % 7:03d},stop_lamps,{FAULT},,,\n" for i in range(30)),
        encoding="utf-8")
    overlay = tmp_path / "fleet.overlay.yaml"
    assert main(["learn", str(ruleset), "--history", str(history), "-o", str(overlay)]) == 0
    assert f"{FAULT} " in capsys.readouterr().out

    prior_before, minutes_before = _minutes_on(load_ruleset(ruleset), FAULT)
    prior_after, minutes_after = _minutes_on(load_ruleset(ruleset, [overlay]), FAULT)
    assert prior_after > 5 * prior_before
    assert minutes_after < minutes_before
