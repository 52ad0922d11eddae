"""Shared fixtures: paths to the bundled rulesets and a way to write mutated copies."""

from __future__ import annotations

from collections.abc import Callable
from pathlib import Path

import pytest

ROOT = Path(__file__).resolve().parent.parent
RULESETS = ROOT / "rulesets"
STOP_LAMPS = RULESETS / "lamp" / "stop_lamps.yaml"


@pytest.fixture
def stop_lamps_text() -> str:
    return STOP_LAMPS.read_text(encoding="utf-8")


@pytest.fixture
def write_copy(tmp_path: Path, stop_lamps_text: str) -> Callable[..., Path]:
    """Write the stop-lamp ruleset with one text replaced; fail if the text is not there."""

    def write(old: str | None = None, new: str = "", *, name: str = "copy.yaml", text: str | None = None) -> Path:
        body = stop_lamps_text if text is None else text
        if old is not None:
            assert old in body, f"fixture text {old!r} not in the ruleset"
            body = body.replace(old, new, 1)
        path = tmp_path / name
        path.write_text(body, encoding="utf-8")
        return path

    return write
