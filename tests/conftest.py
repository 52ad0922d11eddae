"""Shared fixtures: paths to the bundled rulesets, a way to write mutated copies, PostgreSQL."""

from __future__ import annotations

import os
import uuid
from collections.abc import Callable, Iterator
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


# --------------------------------------------------------------------------- PostgreSQL

PG_URL_VARIABLE = "OHMTRAIL_TEST_PG_URL"


def _under_ci() -> bool:
    return os.environ.get("CI", "").lower() not in ("", "0", "false", "no")


@pytest.fixture(scope="session")
def pg_server_url() -> str:
    """URL of the test PostgreSQL server (tools/ensure-postgres.sh starts one and prints it).

    Absent: the test skips on a developer's machine, and fails under CI, where the server must run.
    """
    url = os.environ.get(PG_URL_VARIABLE, "").strip()
    if not url:
        message = f"{PG_URL_VARIABLE} is not set (run `make test`, or `make postgres` and export its URL)"
        if _under_ci():
            pytest.fail(f"PostgreSQL is required under CI: {message}")
        pytest.skip(message)
    return url


@pytest.fixture
def pg_url(pg_server_url: str) -> Iterator[str]:
    """A fresh, empty PostgreSQL database for one test, dropped afterwards."""
    import sqlalchemy as sa

    admin = sa.create_engine(pg_server_url, isolation_level="AUTOCOMMIT")
    name = f"ohmtrail_t_{uuid.uuid4().hex[:12]}"
    try:
        with admin.connect() as conn:
            conn.execute(sa.text(f'CREATE DATABASE "{name}"'))
    except sa.exc.OperationalError as exc:
        admin.dispose()
        if _under_ci():
            pytest.fail(f"PostgreSQL at {PG_URL_VARIABLE} cannot be reached: {exc}")
        pytest.skip(f"PostgreSQL at {PG_URL_VARIABLE} cannot be reached")
    url = sa.engine.make_url(pg_server_url).set(database=name)
    try:
        yield url.render_as_string(hide_password=False)
    finally:
        with admin.connect() as conn:
            conn.execute(sa.text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()
