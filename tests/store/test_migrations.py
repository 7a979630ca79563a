"""Migrations: a fresh database upgraded to head has exactly the ORM's schema."""

from __future__ import annotations

import os
from pathlib import Path

import pytest
from alembic import command
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from sqlalchemy import inspect

from models_store import (
    Base,
    alembic_config,
    check_integrity,
    current_revision,
    head_revision,
    make_engine,
    upgrade,
)


def _diff(url: str) -> list[object]:
    engine = make_engine(url)
    try:
        with engine.connect() as conn:
            return list(compare_metadata(MigrationContext.configure(conn), Base.metadata))
    finally:
        engine.dispose()


def test_upgrade_creates_exactly_the_orm_schema(db_url: str) -> None:
    upgrade(db_url)
    assert _diff(db_url) == []
    engine = make_engine(db_url)
    try:
        tables = set(inspect(engine).get_table_names())
        assert tables == set(Base.metadata.tables) | {"alembic_version"}
        assert current_revision(engine) == head_revision() == "0002"
        assert check_integrity(engine) == []
    finally:
        engine.dispose()


def test_upgrade_is_idempotent_and_downgrade_round_trips(db_url: str) -> None:
    upgrade(db_url)
    upgrade(db_url)  # second start-up: nothing to do
    engine = make_engine(db_url)
    try:
        with engine.begin() as conn:
            config = alembic_config()
            config.attributes["connection"] = conn
            command.downgrade(config, "base")
        assert set(inspect(engine).get_table_names()) <= {"alembic_version"}
        assert check_integrity(engine) != []  # schema behind head is reported
    finally:
        engine.dispose()
    upgrade(db_url)
    assert _diff(db_url) == []


def test_upgrade_does_not_depend_on_the_working_directory(
    tmp_path: Path, monkeypatch: pytest.MonkeyPatch
) -> None:
    elsewhere = tmp_path / "elsewhere"
    elsewhere.mkdir()
    monkeypatch.chdir(elsewhere)
    url = f"sqlite:///{tmp_path / 'cwd.db'}"
    upgrade(url)
    assert _diff(url) == []
    assert os.listdir(elsewhere) == []
