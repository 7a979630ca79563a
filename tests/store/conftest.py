"""Store fixtures: a fresh, migrated database per test, on SQLite and (when configured) PostgreSQL.

Tests that take ``db_url`` (or ``engine``/``factory``/``session``/``model``) run once per backend;
the PostgreSQL run is skipped, saying so, unless RISKFIT_TEST_POSTGRES_URL is set.
"""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest
from sqlalchemy.engine import Engine
from sqlalchemy.orm import Session, sessionmaker

from models_store import (
    RiskModel,
    add_version,
    create_model,
    make_engine,
    make_session_factory,
    upgrade,
)
from tests.store.dbfixtures import fresh_postgres_url, sqlite_url, version_fields


@pytest.fixture(params=["sqlite", pytest.param("postgres", marks=pytest.mark.postgres)])
def db_url(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[str]:
    """URL of an empty database (no tables yet) on each backend."""
    if request.param == "sqlite":
        yield sqlite_url(tmp_path)
        return
    base = request.getfixturevalue("postgres_url")
    with fresh_postgres_url(base) as url:
        yield url


@pytest.fixture
def engine(db_url: str) -> Iterator[Engine]:
    """A migrated database's engine, disposed after the test."""
    upgrade(db_url)
    eng = make_engine(db_url)
    yield eng
    eng.dispose()


@pytest.fixture
def factory(engine: Engine) -> sessionmaker[Session]:
    return make_session_factory(engine)


@pytest.fixture
def session(factory: sessionmaker[Session]) -> Iterator[Session]:
    """A session the test commits itself; rolled back and closed at the end."""
    with factory() as s:
        yield s
        s.rollback()


@pytest.fixture
def model(session: Session) -> RiskModel:
    """A committed model "pipes" with version 1."""
    m = create_model(session=session, name="pipes", description="water main breaks")
    add_version(session=session, model=m, **version_fields())
    session.commit()
    return m
