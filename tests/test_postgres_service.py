"""The PostgreSQL test server that .ci/run and `make test` start is there and is ours.

The store's PostgreSQL tests rely on it; under CI=true this fails rather than skips when the
server is missing, so a green CI run cannot hide untested PostgreSQL support.
"""

from __future__ import annotations

import sqlalchemy as sa


def test_server_answers_on_loopback_with_a_fresh_database(pg_url: str) -> None:
    url = sa.engine.make_url(pg_url)
    # Never any address but loopback (the test cluster listens on 127.0.0.1 only).
    assert url.host in ("127.0.0.1", "localhost", "::1")
    engine = sa.create_engine(url)
    try:
        with engine.connect() as conn:
            assert conn.execute(sa.text("SELECT current_database()")).scalar() == url.database
            tables = conn.execute(
                sa.text("SELECT count(*) FROM information_schema.tables WHERE table_schema = 'public'")
            ).scalar()
            assert tables == 0
            listen = conn.execute(sa.text("SHOW listen_addresses")).scalar()
    finally:
        engine.dispose()
    assert listen in ("127.0.0.1", "localhost", "::1")
