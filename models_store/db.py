"""Engines, sessions, migrations and health checks.

Durability on SQLite
--------------------
Every connection gets ``foreign_keys=ON``, ``journal_mode=WAL``, ``busy_timeout`` and
``synchronous`` (default ``FULL``). In WAL mode a committed transaction is in the WAL file before
COMMIT returns, so it survives kill -9 of the process even with ``NORMAL``; ``NORMAL`` may lose the
last commits on an OS crash or power cut, ``FULL`` fsyncs the WAL at every commit and does not.
riskfit promises that nothing it acknowledged is lost and commits once per request, so the
default is ``FULL`` (one fsync per request); ``sqlite_synchronous="NORMAL"`` trades power-loss
safety for throughput and still survives a killed process.

Transactions on SQLite
----------------------
The driver's own transaction handling is switched off (SQLAlchemy's documented pysqlite recipe,
so SAVEPOINTs and transactional DDL work) and riskfit drives transactions itself:

* every transaction starts ``BEGIN DEFERRED``: reads take no write lock, so GET requests and the
  reading phase of a fit never block writers (WAL readers never block anyone);
* just before the transaction's first write statement (INSERT/UPDATE/DELETE/DDL/SAVEPOINT) the
  still read-only transaction is ended and ``BEGIN IMMEDIATE`` taken on the same connection
  (:func:`_take_write_lock`). Writers thus queue on the busy timeout *there* instead of failing
  with "database is locked" when a read snapshot tries to become a write (a case the busy
  handler cannot resolve in WAL mode).

Reads made before the first write see committed data as of their own statement (like
PostgreSQL's READ COMMITTED); everything from the first write on is serialised. The repository
functions are written for that: numbers and keys are guarded by unique constraints and
re-checked on conflict, exactly as on PostgreSQL. An engine made with
``engine.execution_options(riskfit_sqlite_begin="IMMEDIATE")`` serialises whole transactions.

Errors
------
:func:`store_unavailable` is the one place where a database failure that is not the client's
fault (unreachable server, locked database, missing tables) becomes
:class:`service.errors.StoreError`; the engine's ``handle_error`` hook sends every SQLAlchemy
``OperationalError``/``InterfaceError`` through it, chained with ``from``.
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
    "apply_sqlite_pragmas",
    "check_integrity",
    "current_revision",
    "head_revision",
    "make_engine",
    "make_session_factory",
    "ping",
    "session_scope",
    "store_unavailable",
    "upgrade",
]

MIGRATIONS_DIR = Path(__file__).resolve().parent / "migrations"
SqliteSync = Literal["NORMAL", "FULL"]
_BEGIN_OPTION = "riskfit_sqlite_begin"
_WRITING = "riskfit_sqlite_writing"  # DBAPI connection info: this transaction holds the lock
_WRITE_PREFIXES = ("INSERT", "UPDATE", "DELETE", "REPLACE", "CREATE", "DROP", "ALTER", "SAVEPOINT")
SQLITE_CACHE_KIB = 32_768  # page cache per connection (SQLite's default is 2 MiB)
SQLITE_MMAP_BYTES = 256 * 1024 * 1024
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
    pool_size: int = 40,
    max_overflow: int = 10,
    echo: bool = False,
) -> Engine:
    """Create the engine for ``url`` with riskfit's connection settings (see module docstring).

    SQLite: pragmas and transaction hooks on every connection, ``check_same_thread=False``
    (connections move between the web server's worker threads through the pool).
    PostgreSQL (``postgresql+psycopg://``): ``pool_pre_ping`` so that a restarted server does not
    fail the first request after it.

    ``pool_size`` matches the web server's worker-thread pool (anyio's default of 40 threads),
    so a thread never waits for a connection another thread holds idle; connections are opened
    only when needed, so a quiet server keeps few.
    """
    if sqlite_synchronous not in ("NORMAL", "FULL"):
        raise ValueError(f"sqlite_synchronous must be NORMAL or FULL, not {sqlite_synchronous!r}")
    parsed = _normalise_url(url)
    kwargs: dict[str, Any] = {"echo": echo, "json_serializer": dumps_json}
    is_sqlite = parsed.get_backend_name() == "sqlite"
    if is_sqlite:
        kwargs["connect_args"] = {"check_same_thread": False, "timeout": busy_timeout_ms / 1000.0}
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
        apply_sqlite_pragmas(dbapi_connection, busy_timeout_ms, synchronous)

    @event.listens_for(engine, "begin")
    def _begin(conn: Connection) -> None:
        mode = conn.get_execution_options().get(_BEGIN_OPTION, "DEFERRED")
        conn.info[_WRITING] = mode == "IMMEDIATE"
        conn.exec_driver_sql(f"BEGIN {mode}")

    @event.listens_for(engine, "before_cursor_execute")
    def _before_execute(conn: Connection, cursor: Any, statement: str, *_: Any) -> None:
        if conn.info.get(_WRITING, True) or not conn.in_transaction():
            return
        if statement.lstrip()[:9].upper().startswith(_WRITE_PREFIXES):
            _take_write_lock(cursor)
            conn.info[_WRITING] = True


def apply_sqlite_pragmas(dbapi_connection: Any, busy_timeout_ms: int, synchronous: str) -> None:
    """The settings of every riskfit SQLite connection (see the module docstring); the driver's
    own transaction handling off (``isolation_level = None``)."""
    if synchronous not in ("NORMAL", "FULL"):
        raise ValueError(f"sqlite synchronous must be NORMAL or FULL, not {synchronous!r}")
    dbapi_connection.isolation_level = None  # the driver must not issue BEGIN itself
    cursor = dbapi_connection.cursor()
    try:
        cursor.execute(f"PRAGMA busy_timeout = {int(busy_timeout_ms)}")
        cursor.execute("PRAGMA foreign_keys = ON")
        cursor.execute("PRAGMA journal_mode = WAL")
        cursor.execute(f"PRAGMA synchronous = {synchronous}")
        cursor.execute(f"PRAGMA cache_size = -{SQLITE_CACHE_KIB}")  # negative: KiB
        cursor.execute(f"PRAGMA mmap_size = {SQLITE_MMAP_BYTES}")  # reads share OS pages
    finally:
        cursor.close()


def _take_write_lock(cursor: Any) -> None:
    """End the read-only transaction and begin an IMMEDIATE one (waits up to busy_timeout)."""
    cursor.execute("COMMIT")  # nothing was written: this only releases the read snapshot
    try:
        cursor.execute("BEGIN IMMEDIATE")
    except Exception as error:  # sqlite3.OperationalError, raised outside SQLAlchemy's wrapper
        cursor.execute("BEGIN DEFERRED")  # keep SQLAlchemy's view (a transaction is open) true
        raise store_unavailable(str(error), "sqlite") from error


def store_unavailable(message: str, backend: str | None) -> StoreError:
    """The one translation of infrastructure failures into :class:`StoreError`."""
    first_line = (message.strip().splitlines() or [""])[0][:300]
    if "no such table" in first_line:
        remedy = "the schema is missing: run `riskfit db upgrade` (or restart the service)"
    elif "locked" in first_line or "busy" in first_line:
        remedy = "the database stayed busy past the busy timeout; retry the request"
    else:
        remedy = "check that the database named by RISKFIT_DATABASE_URL is reachable, then retry"
    return StoreError(
        f"the store is unavailable: {first_line}", remedy=remedy, details={"backend": backend}
    )


def _translate_operational_error(context: ExceptionContext) -> None:
    """Engine ``handle_error`` hook: infrastructure failures become :class:`StoreError`."""
    if context.is_pre_ping:
        return  # the pool handles it by reconnecting
    error = context.sqlalchemy_exception
    if not isinstance(error, exc.OperationalError | exc.InterfaceError):
        return
    backend = context.dialect.name if context.dialect else None
    raise store_unavailable(str(context.original_exception), backend) from error


def make_session_factory(engine: Engine) -> sessionmaker[Session]:
    """Sessions bound to ``engine``; objects stay readable after commit (``expire_on_commit``
    off) so a route can shape its response from what it just stored."""
    return sessionmaker(bind=engine, expire_on_commit=False, autoflush=True)


@contextlib.contextmanager
def session_scope(factory: sessionmaker[Session], *, read_only: bool = False) -> Iterator[Session]:
    """One unit of work: commit once at the end, roll back on any exception, always close.

    ``read_only=True`` rolls back at the end instead of committing (a report cannot write by
    accident). Reads never hold SQLite's write lock either way (see the module docstring).
    """
    session = factory()
    try:
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
        serial = engine.execution_options(**{_BEGIN_OPTION: "IMMEDIATE"})
        with serial.begin() as conn:
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
    with engine.connect() as conn:
        conn.execute(text("SELECT 1"))


def check_integrity(engine: Engine) -> list[str]:
    """Problems found in the database (empty list: healthy).

    SQLite: ``PRAGMA integrity_check`` and ``PRAGMA foreign_key_check``. Every backend: the
    schema is at the package's head revision.
    """
    problems: list[str] = []
    with engine.connect() as conn:
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
