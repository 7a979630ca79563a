"""Engine settings, error translation and the UTC/JSON column types."""

from __future__ import annotations

import math
from datetime import UTC, datetime, timedelta, timezone
from pathlib import Path

import pytest
from sqlalchemy import exc
from sqlalchemy.engine import Engine
from sqlalchemy.orm import Session

from models_store import (
    RiskModel,
    add_alert,
    create_model,
    get_model,
    list_alerts,
    list_models,
    make_engine,
    make_session_factory,
    ping,
    session_scope,
    upgrade,
)
from service.errors import StoreError
from tests.store.dbfixtures import sqlite_url


def test_sqlite_pragmas_on_every_pooled_connection(tmp_path: Path) -> None:
    engine = make_engine(sqlite_url(tmp_path), busy_timeout_ms=1234)
    try:
        conns = [engine.connect() for _ in range(3)]  # three distinct DBAPI connections
        for conn in conns:
            assert conn.exec_driver_sql("PRAGMA foreign_keys").scalar() == 1
            assert conn.exec_driver_sql("PRAGMA journal_mode").scalar() == "wal"
            assert conn.exec_driver_sql("PRAGMA busy_timeout").scalar() == 1234
            assert conn.exec_driver_sql("PRAGMA synchronous").scalar() == 2  # FULL
        for conn in conns:
            conn.close()
    finally:
        engine.dispose()
    normal = make_engine(sqlite_url(tmp_path, "normal.db"), sqlite_synchronous="NORMAL")
    try:
        with normal.connect() as conn:
            assert conn.exec_driver_sql("PRAGMA synchronous").scalar() == 1
    finally:
        normal.dispose()


def test_sqlite_write_lock_is_taken_at_the_first_write(tmp_path: Path) -> None:
    """Readers never wait; a second writer waits at its first write, then fails after the busy
    timeout with StoreError chained to the driver's error."""
    url = sqlite_url(tmp_path)
    upgrade(url)
    engine = make_engine(url, busy_timeout_ms=100)
    try:
        factory = make_session_factory(engine)
        with session_scope(factory) as first:
            create_model(session=first, name="a")  # holds the write lock until commit
            with session_scope(factory, read_only=True) as reader:
                assert get_model(session=reader, name="b") is None
            with pytest.raises(StoreError, match="locked") as info, session_scope(factory) as s:
                assert get_model(session=s, name="a") is None  # reading is fine
                create_model(session=s, name="b")
            assert type(info.value.__cause__).__name__ == "OperationalError"  # driver's error
        with session_scope(factory, read_only=True) as s:
            assert [m.name for m in list_models(session=s)] == ["a"]
    finally:
        engine.dispose()


def test_sqlite_read_then_write_survives_a_concurrent_commit(tmp_path: Path) -> None:
    """A transaction that read before another writer committed can still write: the read
    snapshot is released and the write lock taken first (no SQLITE_BUSY_SNAPSHOT)."""
    url = sqlite_url(tmp_path)
    upgrade(url)
    engine = make_engine(url, busy_timeout_ms=100)
    try:
        factory = make_session_factory(engine)
        with session_scope(factory) as slow:
            assert list_models(session=slow) == []  # read snapshot taken
            with session_scope(factory) as quick:
                create_model(session=quick, name="quick")
            create_model(session=slow, name="slow")  # would fail without the lock hand-over
        with session_scope(factory, read_only=True) as s:
            assert [m.name for m in list_models(session=s)] == ["quick", "slow"]
    finally:
        engine.dispose()


def test_unreachable_postgres_is_a_store_error() -> None:
    engine = make_engine("postgresql://postgres@127.0.0.1:9/nowhere")  # port 9: nothing listens
    try:
        with pytest.raises(StoreError) as info:
            ping(engine)
        assert info.value.remedy is not None and "RISKFIT_DATABASE_URL" in info.value.remedy
        assert type(info.value.__cause__).__name__ == "OperationalError"
    finally:
        engine.dispose()


def test_missing_schema_is_a_store_error_naming_the_remedy(tmp_path: Path) -> None:
    engine = make_engine(sqlite_url(tmp_path))
    try:
        ping(engine)  # reachable
        with pytest.raises(StoreError) as info, session_scope(make_session_factory(engine)) as s:
            s.get(RiskModel, 1)
        assert "db upgrade" in (info.value.remedy or "")
    finally:
        engine.dispose()


def test_timestamps_are_stored_utc_and_returned_aware(
    engine: Engine, session: Session, model: RiskModel
) -> None:
    cet = timezone(timedelta(hours=1))
    raised = datetime(2024, 1, 15, 13, 30, 0, 123456, tzinfo=cet)
    add_alert(
        session=session,
        model=model,
        measure="o_e",
        value=1.4,
        threshold=1.2,
        direction="above",
        raised_at=raised,
    )
    session.commit()
    with make_session_factory(engine)() as fresh:
        (alert,) = list_alerts(session=fresh, model=model)
        assert alert.raised_at.tzinfo is not None
        assert alert.raised_at.utcoffset() == timedelta(0)
        assert alert.raised_at == datetime(2024, 1, 15, 12, 30, 0, 123456, tzinfo=UTC)


def test_naive_datetimes_and_nan_json_are_refused(session: Session, model: RiskModel) -> None:
    with pytest.raises(exc.StatementError, match="naive datetime"):
        add_alert(
            session=session,
            model=model,
            measure="o_e",
            value=1.0,
            threshold=1.2,
            direction="above",
            raised_at=datetime(2024, 1, 1),
        )
    session.rollback()
    # SQLite: wrapped in StatementError at bind time; psycopg: raised by its JSON adapter.
    with pytest.raises((exc.StatementError, ValueError), match="Out of range float"):
        add_alert(
            session=session,
            model=model,
            measure="o_e",
            value=1.0,
            threshold=1.2,
            direction="above",
            details={"z": math.nan},
        )
