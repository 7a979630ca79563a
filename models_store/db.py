"""Engines, sessions, migrations and health checks.

Durability and concurrency on SQLite
------------------------------------
Every connection gets ``foreign_keys=ON``, ``journal_mode=WAL``, ``busy_timeout`` and
``synchronous`` (default ``FULL``). In WAL mode a committed transaction is in the WAL file before
COMMIT returns, so it survives kill -9 of the process even with ``NORMAL``; ``NORMAL`` may lose the
last commits on an OS crash or power cut, ``FULL`` fsyncs the WAL at every commit and does not.
riskfit promises that nothing it acknowledged is lost, and it commits once per request, so the
default is ``FULL`` (one fsync per request); pass ``sqlite_synchronous="NORMAL"`` to trade
power-loss safety for throughput.

The driver's own transaction handling is switched off and every transaction starts with
``BEGIN IMMEDIATE`` (SQLAlchemy's documented pysqlite recipe). Writers therefore queue on the busy
timeout at BEGIN instead of failing later with "database is locked" when a read transaction tries
to upgrade to a write (which the busy handler cannot resolve in WAL mode); SAVEPOINTs and
transactional DDL work correctly. Read-only work may start with ``BEGIN DEFERRED`` through
``session_scope(..., read_only=True)`` so that long reports do not hold the write lock. WAL readers
never block writers or each other.

Errors
------
:func:`_translate_operational_error` (an engine ``handle_error`` hook) is the one place where a
SQLAlchemy ``OperationalError``/``InterfaceError`` (unreachable server, locked database, missing
tables) becomes :class:`service.errors.StoreError`, chained with ``from``.
"""

from __future__ import annotations

import contextlib
from collections.abc import Iterator
from pathlib import Path
from typing import Any, Literal

from alembic import command
from alembic.config import Config
from alembic.runtime.migration import MigrationContext
from alembic.script import ScriptDirectory
from sqlalchemy import create_engine, event, exc, text
from sqlalchemy.engine import URL, Connection, Engine, ExceptionContext, make_url
from sqlalchemy.orm import Session, sessionmaker

from models_store._types import dumps_json
from service.errors import StoreError

__all__ = [
    "MIGRATIONS_DIR",
    "alembic_config",
    "check_integrity",
    "current_revision",
    "head_revision",
    "make_engine",
    "make_session_factory",
    "ping",
    "reader",
    "session_scope",
    "upgrade",
]

MIGRATIONS_DIR = Path(__file__).resolve().parent / "migrations"
SqliteSync = Literal["NORMAL", "FULL"]
_BEGIN_OPTION = "riskfit_sqlite_begin"
_MIGRATION_LOCK_KEY = 0x7269736B  # arbitrary constant for pg_advisory_xact_lock during upgrades


def _normalise_url(url: str | URL) -> URL:
    """Parse ``url``; a bare ``postgresql://`` URL is given the psycopg 3 driver."""
    parsed = make_url(url)
    if parsed.drivername in ("postgresql", "postgres"):
        parsed = parsed.set(drivername="postgresql+psycopg")
    return parsed


def make_engine(
    url: str | URL,
    *,
    busy_timeout_ms: int = 30_000,
    sqlite_synchronous: SqliteSync = "FULL",
    pool_size: int = 10,
    max_overflow: int = 20,
    echo: bool = False,
) -> Engine:
    """Create the engine for ``url`` with riskfit's connection settings (see module docstring).

    SQLite: pragmas and ``BEGIN IMMEDIATE`` on every connection, ``check_same_thread=False``
    (connections move between the web server's worker threads through the pool).
    PostgreSQL (``postgresql+psycopg://``): ``pool_pre_ping`` so that a restarted server does not
    fail the first request after it.
    """
    if sqlite_synchronous not in ("NORMAL", "FULL"):
        raise ValueError(f"sqlite_synchronous must be NORMAL or FULL, not {sqlite_synchronous!r}")
    parsed = _normalise_url(url)
    kwargs: dict[str, Any] = {"echo": echo, "json_serializer": dumps_json}
    is_sqlite = parsed.get_backend_name() == "sqlite"
    if is_sqlite:
        kwargs["connect_args"] = {
            "check_same_thread": False,
            "timeout": busy_timeout_ms / 1000.0,
        }
        if parsed.database not in (None, "", ":memory:"):
            kwargs.update(pool_size=pool_size, max_overflow=max_overflow)
    else:
        kwargs.update(pool_pre_ping=True, pool_size=pool_size, max_overflow=max_overflow)
    engine = create_engine(parsed, **kwargs)
    if is_sqlite:
        _install_sqlite_hooks(engine, busy_timeout_ms, sqlite_synchronous)
    event.listen(engine, "handle_error", _translate_operational_error)
    return engine


def _install_sqlite_hooks(engine: Engine, busy_timeout_ms: int, synchronous: SqliteSync) -> None:
    @event.listens_for(engine, "connect")
    def _set_pragmas(dbapi_connection: Any, _record: Any) -> None:
        dbapi_connection.isolation_level = None  # the driver must not issue BEGIN itself
        cursor = dbapi_connection.cursor()
        try:
            cursor.execute(f"PRAGMA busy_timeout = {int(busy_timeout_ms)}")
            cursor.execute("PRAGMA foreign_keys = ON")
            cursor.execute("PRAGMA journal_mode = WAL")
            cursor.execute(f"PRAGMA synchronous = {synchronous}")
        finally:
            cursor.close()

    @event.listens_for(engine, "begin")
    def _begin(conn: Connection) -> None:
        mode = conn.get_execution_options().get(_BEGIN_OPTION, "IMMEDIATE")
        conn.exec_driver_sql(f"BEGIN {mode}")


def _translate_operational_error(context: ExceptionContext) -> None:
    """Turn infrastructure failures into :class:`StoreError` (the one translation point)."""
    if context.is_pre_ping:
        return  # the pool handles it by reconnecting
    error = context.sqlalchemy_exception
    if not isinstance(error, exc.OperationalError | exc.InterfaceError):
        return
    original = str(context.original_exception).strip().splitlines()[0][:300]
    if "no such table" in original:
        remedy = "the schema is missing: run `riskfit db upgrade` (or restart the service)"
    elif "locked" in original or "busy" in original:
        remedy = "the database stayed busy past the busy timeout; retry the request"
    else:
        remedy = "check that the database named by RISKFIT_DATABASE_URL is reachable, then retry"
    raise StoreError(
        f"the store is unavailable: {original}",
        remedy=remedy,
        details={"backend": context.dialect.name if context.dialect else None},
    ) from error


def reader(engine: Engine) -> Engine:
    """A view of ``engine`` (same pool) whose transactions start ``BEGIN DEFERRED`` on SQLite:
    for read-only work that should not hold the write lock. No effect on other backends."""
    return engine.execution_options(**{_BEGIN_OPTION: "DEFERRED"})


def make_session_factory(engine: Engine) -> sessionmaker[Session]:
    """Sessions bound to ``engine``; objects stay readable after commit (``expire_on_commit``
    off) so a route can shape its response from what it just stored."""
    return sessionmaker(bind=engine, expire_on_commit=False, autoflush=True)


@contextlib.contextmanager
def session_scope(factory: sessionmaker[Session], *, read_only: bool = False) -> Iterator[Session]:
    """One unit of work: commit once at the end, roll back on any exception, always close.

    ``read_only=True`` starts SQLite transactions DEFERRED (no write lock) and rolls back at
    the end instead of committing.
    """
    session = factory()
    try:
        if read_only:
            session.connection(execution_options={_BEGIN_OPTION: "DEFERRED"})
        yield session
        if read_only:
            session.rollback()
        else:
            session.commit()
    except BaseException:
        session.rollback()
        raise
    finally:
        session.close()


# --- migrations --------------------------------------------------------------------------------


def alembic_config() -> Config:
    """An Alembic config pointing at the migrations shipped inside the package (cwd-free)."""
    config = Config()
    config.set_main_option("script_location", str(MIGRATIONS_DIR))
    return config


def head_revision() -> str | None:
    """The newest migration revision shipped with this package."""
    return ScriptDirectory.from_config(alembic_config()).get_current_head()


def current_revision(engine: Engine) -> str | None:
    """The revision the database is at (None for an empty database)."""
    with engine.connect() as conn:
        return MigrationContext.configure(conn).get_current_revision()


def upgrade(url_or_engine: str | URL | Engine, revision: str = "head") -> None:
    """Apply migrations up to ``revision`` in one transaction.

    Safe to call from several processes at start-up: SQLite serialises them with BEGIN
    IMMEDIATE, PostgreSQL with a transaction-level advisory lock; the later ones find the schema
    at head and do nothing.
    """
    owned = not isinstance(url_or_engine, Engine)
    engine = make_engine(url_or_engine) if not isinstance(url_or_engine, Engine) else url_or_engine
    try:
        with engine.begin() as conn:
            if conn.dialect.name == "postgresql":
                conn.execute(text("SELECT pg_advisory_xact_lock(:k)"), {"k": _MIGRATION_LOCK_KEY})
            config = alembic_config()
            config.attributes["connection"] = conn
            command.upgrade(config, revision)
    finally:
        if owned:
            engine.dispose()


# --- health ------------------------------------------------------------------------------------


def ping(engine: Engine) -> None:
    """Readiness: one round trip to the database; raises :class:`StoreError` when unreachable."""
    with reader(engine).connect() as conn:
        conn.execute(text("SELECT 1"))


def check_integrity(engine: Engine) -> list[str]:
    """Problems found in the database (empty list: healthy).

    SQLite: ``PRAGMA integrity_check`` and ``PRAGMA foreign_key_check``. Every backend: the
    schema is at the package's head revision.
    """
    problems: list[str] = []
    with reader(engine).connect() as conn:
        if conn.dialect.name == "sqlite":
            rows = conn.exec_driver_sql("PRAGMA integrity_check").scalars().all()
            problems += [f"integrity_check: {r}" for r in rows if r != "ok"]
            for row in conn.exec_driver_sql("PRAGMA foreign_key_check").all():
                problems.append(f"foreign_key_check: table {row[0]} rowid {row[1]} -> {row[2]}")
        else:
            conn.execute(text("SELECT 1"))
        current = MigrationContext.configure(conn).get_current_revision()
    head = head_revision()
    if current != head:
        problems.append(f"schema at revision {current!r}, package head is {head!r}")
    return problems
