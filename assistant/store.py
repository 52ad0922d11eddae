"""Where sessions are kept: SQLAlchemy over SQLite (the default) or PostgreSQL.

A session is one row (its :class:`SessionRecord` without the steps, as JSON) and one row per
step (each :class:`Step` as JSON, with its index, kind, time and digest beside it for
queries). Each :meth:`Store.append` is its own transaction, committed before it returns, so a
process killed between two questions loses nothing already answered. Steps are only ever
added: a step, once written, is not changed (an undo is a step of its own).

Which database: ``open_store(url)``, else ``$OHMTRAIL_DB``, else ``sessions.db`` in the user's
data folder (platformdirs ``user_data_dir("ohmtrail")``). A URL is ``sqlite:///FILE`` or
``postgresql://USER@HOST/DB`` (driven by psycopg 3); a plain file path means SQLite. SQLite
runs in WAL mode with ``synchronous=FULL`` and a busy timeout, so a reader (``ohmtrail
sessions``) never blocks the session being written and a brief lock is waited out.

Every database failure ends as a one-line :class:`StoreError` (locked, read-only, not a
database, unreachable server); an unknown session id is a :class:`SessionError`.
"""

from __future__ import annotations

import json
import logging
import os
import sqlite3
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import dataclass
from datetime import datetime, timezone
from pathlib import Path
from typing import Any

import platformdirs
from pydantic import ValidationError
from sqlalchemy import (
    Column,
    Engine,
    ForeignKey,
    Integer,
    MetaData,
    String,
    Table,
    Text,
    create_engine,
    event,
    func,
    insert,
    inspect,
    select,
    update,
)
from sqlalchemy import exc as sa_exc
from sqlalchemy.engine import URL, make_url

from assistant.errors import SessionError, StoreError
from assistant.record import SessionRecord, Step

log = logging.getLogger("ohmtrail.store")

SCHEMA_VERSION = "1"
DEFAULT_FILE = "sessions.db"
BUSY_TIMEOUT_SECONDS = 5.0

_metadata = MetaData()
_meta = Table(
    "ohmtrail_meta",
    _metadata,
    Column("key", String(64), primary_key=True),
    Column("value", Text, nullable=False),
)
_sessions = Table(
    "ohmtrail_sessions",
    _metadata,
    Column("id", Text, primary_key=True),
    Column("ruleset_id", Text, nullable=False),
    Column("started", Text, nullable=False),
    Column("status", String(16), nullable=False),
    Column("header", Text, nullable=False),  # the SessionRecord without its steps, JSON: the truth
    Column("updated", Text, nullable=False),
)
_steps = Table(
    "ohmtrail_steps",
    _metadata,
    Column("session_id", Text, ForeignKey("ohmtrail_sessions.id"), primary_key=True),
    Column("idx", Integer, primary_key=True, autoincrement=False),
    Column("kind", String(16), nullable=False),
    Column("at", Text, nullable=False),
    Column("digest", Text),
    Column("body", Text, nullable=False),  # the Step, JSON: the truth; the columns beside it are for queries
)


@dataclass(frozen=True)
class SessionSummary:
    """One line of ``ohmtrail sessions``: a session without its steps."""

    id: str
    ruleset_id: str
    started: str
    status: str
    steps: int
    vehicle: str  # VIN, fleet number or model year as given; "" if none
    technician: str | None
    complaint: str | None
    diagnosis: str | None
    probability: float | None


def default_url() -> str:
    """The SQLite file in the user's data folder (the folder is created if missing)."""
    folder = Path(platformdirs.user_data_dir("ohmtrail"))
    return f"sqlite:///{folder / DEFAULT_FILE}"


def resolve_url(url: str | None = None) -> URL:
    """The database URL to use: the one given, ``$OHMTRAIL_DB``, or the default file."""
    text = url or os.environ.get("OHMTRAIL_DB") or default_url()
    if "://" not in text:  # a plain path: a SQLite file
        text = f"sqlite:///{Path(text).expanduser()}"
    try:
        parsed = make_url(text)
    except sa_exc.ArgumentError as exc:
        raise StoreError(f"'{text}' is not a database URL; use sqlite:///FILE or postgresql://HOST/DB") from exc
    backend = parsed.get_backend_name()
    if backend in ("postgres", "postgresql"):
        return parsed.set(drivername="postgresql+psycopg")
    if backend != "sqlite":
        raise StoreError(f"'{parsed.render_as_string()}': sessions are stored in SQLite or PostgreSQL, "
                         f"not {backend}")
    return parsed


def open_store(url: str | None = None, *, busy_timeout: float = BUSY_TIMEOUT_SECONDS) -> Store:
    """Open (and on first use create) the session store at ``url``; see the module docstring."""
    resolved = resolve_url(url)
    where = _where(resolved)
    if resolved.get_backend_name() == "sqlite":
        engine = _sqlite_engine(resolved, where, url is None and not os.environ.get("OHMTRAIL_DB"),
                                busy_timeout)
    else:
        engine = create_engine(resolved, pool_pre_ping=True,
                               connect_args={"connect_timeout": max(1, int(busy_timeout))})
    store = Store(engine, where)
    store._prepare()
    return store


def _where(url: URL) -> str:
    if url.get_backend_name() == "sqlite":
        return url.database or ":memory:"
    return url.render_as_string(hide_password=True)


def _sqlite_engine(url: URL, where: str, is_default: bool, busy_timeout: float) -> Engine:
    if url.database and url.database != ":memory:" and not url.database.startswith("file:"):
        path = Path(url.database)
        if is_default:
            path.parent.mkdir(parents=True, exist_ok=True)
        elif not path.parent.is_dir():
            raise StoreError(f"cannot open the session store {where}: folder {path.parent} does not exist")
        if path.is_dir():
            raise StoreError(f"cannot open the session store {where}: it is a folder")
    engine = create_engine(url, connect_args={"timeout": busy_timeout})

    @event.listens_for(engine, "connect")
    def _pragmas(dbapi_connection: sqlite3.Connection, _record: Any) -> None:
        cursor = dbapi_connection.cursor()
        try:
            cursor.execute(f"PRAGMA busy_timeout = {int(busy_timeout * 1000)}")
            try:
                cursor.execute("PRAGMA journal_mode = WAL")
            except sqlite3.OperationalError as exc:
                # A read-only file cannot switch journal; it can still be listed and loaded.
                if "readonly" not in str(exc):
                    raise
                log.info("%s is read-only: not switching it to WAL", where)
            cursor.execute("PRAGMA synchronous = FULL")
            cursor.execute("PRAGMA foreign_keys = ON")
        finally:
            cursor.close()

    return engine


class Store:
    """Sessions and their steps in one database. Open it with :func:`open_store`."""

    def __init__(self, engine: Engine, where: str) -> None:
        self._engine = engine
        self.where = where  # the file, or the URL without its password, for messages

    # ------------------------------------------------------------------ lifecycle

    def __enter__(self) -> Store:
        return self

    def __exit__(self, *exc: object) -> None:
        self.close()

    def close(self) -> None:
        """Release the database connections."""
        self._engine.dispose()

    def _prepare(self) -> None:
        with self._guard("open"):
            names = set(inspect(self._engine).get_table_names())
            if _meta.name not in names:
                if names & {_sessions.name, _steps.name}:
                    raise StoreError(f"{self.where} holds ohmtrail tables but no schema version; "
                                     "it was not written by this program")
                with self._engine.begin() as conn:
                    _metadata.create_all(conn)
                    conn.execute(insert(_meta).values(key="schema", value=SCHEMA_VERSION))
                log.info("created the session store %s", self.where)
                return
            with self._engine.connect() as conn:
                version = conn.execute(select(_meta.c.value).where(_meta.c.key == "schema")).scalar()
            if version != SCHEMA_VERSION:
                raise StoreError(f"the session store {self.where} has schema version {version!r}; "
                                 f"this ohmtrail reads version {SCHEMA_VERSION}")

    # ------------------------------------------------------------------ writing

    def create(self, record: SessionRecord) -> None:
        """Write a new session with any steps it already has (SessionError if the id is taken)."""
        if "\x00" in record.id or not record.id.strip():
            raise SessionError(f"{record.id!r} cannot be a session id")
        header = _header(record)
        now = _now()
        with self._guard("create a session in"):
            with self._engine.begin() as conn:
                exists = conn.execute(select(_sessions.c.id).where(_sessions.c.id == record.id)).first()
                if exists:
                    raise SessionError(f"a session with id '{record.id}' already exists in {self.where}")
                conn.execute(insert(_sessions).values(
                    id=record.id, ruleset_id=_column(record.ruleset_id), started=_column(record.started),
                    status=record.status, header=header, updated=now))
                for i, step in enumerate(record.steps):
                    if step.index != i:
                        raise SessionError(f"step {step.index} of session '{record.id}' is out of order "
                                           f"(expected {i})")
                    conn.execute(insert(_steps).values(_step_row(record.id, step)))

    def append(self, session_id: str, step: Step) -> None:
        """Add the next step of a session; committed before this returns."""
        with self._guard("write a step to"):
            with self._engine.begin() as conn:
                self._require(conn, session_id)
                count = conn.execute(select(func.count()).select_from(_steps)
                                     .where(_steps.c.session_id == session_id)).scalar_one()
                if step.index != count:
                    raise SessionError(f"step {step.index} of session '{session_id}' is out of order "
                                       f"(the next step is {count})")
                conn.execute(insert(_steps).values(_step_row(session_id, step)))
                conn.execute(update(_sessions).where(_sessions.c.id == session_id).values(updated=_now()))

    def update(self, session_id: str, **fields: Any) -> SessionRecord:
        """Change header fields of a session (status, diagnosis, finished, ...); returns the record."""
        if "steps" in fields or "id" in fields:
            raise SessionError("a session's id and steps cannot be changed; append a step instead")
        with self._guard("update a session in"):
            with self._engine.begin() as conn:
                row = self._require(conn, session_id)
                merged = {**json.loads(row.header), **_plain(fields)}
                try:
                    header = SessionRecord.model_validate(merged)
                except ValidationError as exc:
                    first = exc.errors(include_url=False)[0]
                    where = ".".join(str(p) for p in first["loc"])
                    raise SessionError(f"cannot set {where} of session '{session_id}': {first['msg']}") from exc
                conn.execute(update(_sessions).where(_sessions.c.id == session_id).values(
                    status=header.status, header=_header(header), updated=_now()))
        return self.load(session_id)

    # ------------------------------------------------------------------ reading

    def load(self, session_id: str) -> SessionRecord:
        """The whole session with every step, in order (SessionError if the id is unknown)."""
        with self._guard("read"):
            with self._engine.connect() as conn:
                row = self._require(conn, session_id)
                bodies = conn.execute(select(_steps.c.idx, _steps.c.body)
                                      .where(_steps.c.session_id == session_id)
                                      .order_by(_steps.c.idx)).all()
        try:
            steps = tuple(Step.model_validate(json.loads(body)) for _, body in bodies)
            return SessionRecord.model_validate({**json.loads(row.header), "steps": steps})
        except (ValidationError, ValueError) as exc:
            raise StoreError(f"session '{session_id}' in {self.where} cannot be read back: {exc}".splitlines()[0]
                             ) from exc

    def list(self) -> list[SessionSummary]:
        """Every session, oldest first, without its steps."""
        counts = (select(_steps.c.session_id, func.count().label("n"))
                  .group_by(_steps.c.session_id).subquery())
        query = (select(_sessions.c.id, _sessions.c.header, counts.c.n)
                 .outerjoin(counts, counts.c.session_id == _sessions.c.id)
                 .order_by(_sessions.c.started, _sessions.c.id))
        with self._guard("read"):
            with self._engine.connect() as conn:
                rows = conn.execute(query).all()
        return [_summary(json.loads(row.header), row.n or 0) for row in rows]

    def exists(self, session_id: str) -> bool:
        """Whether a session with this id is stored."""
        with self._guard("read"), self._engine.connect() as conn:
            return conn.execute(select(_sessions.c.id).where(_sessions.c.id == session_id)).first() is not None

    def find(self, prefix: str) -> str:
        """The one session id that starts with ``prefix`` (SessionError if none or several)."""
        if self.exists(prefix):
            return prefix
        escaped = prefix.replace("\\", "\\\\").replace("%", "\\%").replace("_", "\\_")
        with self._guard("read"), self._engine.connect() as conn:
            ids = [r[0] for r in conn.execute(select(_sessions.c.id)
                                              .where(_sessions.c.id.like(f"{escaped}%", escape="\\"))
                                              .limit(5))]
        if len(ids) == 1:
            return str(ids[0])
        if ids:
            raise SessionError(f"'{prefix}' could be any of: {', '.join(ids)}")
        raise SessionError(f"no session '{prefix}' in {self.where}; `ohmtrail sessions` lists them")

    # ------------------------------------------------------------------ helpers

    def _require(self, conn: Any, session_id: str) -> Any:
        row = conn.execute(select(_sessions.c.header).where(_sessions.c.id == session_id)).first()
        if row is None:
            raise SessionError(f"no session '{session_id}' in {self.where}; `ohmtrail sessions` lists them")
        return row

    @contextmanager
    def _guard(self, doing: str) -> Iterator[None]:
        """Turn a database failure into one StoreError line that says what to do."""
        try:
            yield
        except (StoreError, SessionError):
            raise
        except sa_exc.SQLAlchemyError as exc:
            raise StoreError(_explain(exc, doing, self.where)) from exc
        except sqlite3.Error as exc:
            raise StoreError(_explain(exc, doing, self.where)) from exc


def _explain(exc: BaseException, doing: str, where: str) -> str:
    cause = getattr(exc, "orig", None) or exc
    text = str(cause).strip().splitlines()[0] if str(cause).strip() else type(cause).__name__
    low = text.lower()
    if "database is locked" in low or "database table is locked" in low:
        return f"the session store {where} is locked by another program; try again when it has finished"
    if "readonly" in low or "read-only" in low:
        return f"cannot {doing} the session store {where}: it is read-only"
    if "not a database" in low or "file is encrypted" in low:
        return f"{where} is not a database; give another file with --db or OHMTRAIL_DB"
    if "unable to open database file" in low:
        return f"cannot open the session store {where}: the file or its folder cannot be opened"
    if isinstance(exc, sa_exc.OperationalError) and "psycopg" in type(cause).__module__:
        return f"cannot reach the session store {where}: {text}"
    return f"cannot {doing} the session store {where}: {text}"


def _now() -> str:
    return datetime.now(timezone.utc).isoformat(timespec="microseconds")


def _plain(value: Any) -> Any:
    """Pydantic models inside ``update(**fields)`` as plain data."""
    if hasattr(value, "model_dump"):
        return value.model_dump(mode="python")
    if isinstance(value, dict):
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, (list, tuple)):
        return [_plain(v) for v in value]
    return value


def _dumps(data: Any) -> str:
    # Python's json keeps every float exactly (repr) and writes inf as Infinity, which it reads back.
    return json.dumps(data, ensure_ascii=False, sort_keys=True, separators=(",", ":"))


def _header(record: SessionRecord) -> str:
    return _dumps(record.model_dump(mode="python", exclude={"steps"}))


def _step_row(session_id: str, step: Step) -> dict[str, Any]:
    return {"session_id": session_id, "idx": step.index, "kind": step.kind, "at": _column(step.at),
            "digest": None if step.digest is None else _column(step.digest),
            "body": _dumps(step.model_dump(mode="python"))}


def _column(text: str) -> str:
    # PostgreSQL text cannot hold NUL; the query columns may lose it, the JSON beside them keeps it.
    return text.replace("\x00", "\ufffd")


def _summary(header: dict[str, Any], steps: int) -> SessionSummary:
    vehicle = header.get("vehicle") or {}
    parts = [str(vehicle[k]) for k in ("fleet_number", "vin", "model_year") if vehicle.get(k) is not None]
    return SessionSummary(
        id=header["id"], ruleset_id=header["ruleset_id"], started=header["started"],
        status=header["status"], steps=steps, vehicle=" ".join(parts),
        technician=header.get("technician"), complaint=header.get("complaint"),
        diagnosis=header.get("diagnosis"), probability=header.get("probability"),
    )
