"""The score log's one-statement append on SQLite (models_store.score_append).

Checked against the session path of the same module family: rows appended in one statement
read back exactly as rows written by ``add_score_batch``; a champion claim is checked inside
the statement; the statement is atomic. SQLite only (PostgreSQL keeps the session path).
"""

from __future__ import annotations

import sqlite3
from collections.abc import Iterator
from datetime import UTC, datetime
from pathlib import Path
from typing import Any

import pytest
from sqlalchemy import select
from sqlalchemy.engine import Engine
from sqlalchemy.orm import Session

from models_store import RiskModel, add_version, create_model, make_engine, upgrade
from models_store.champions import set_champion
from models_store.orm import Score
from models_store.score_append import (
    APPEND_MAX_ROWS,
    FreshRows,
    append_fresh,
    current_champion_of,
    present_ids,
)
from models_store.scores import add_score_batch, bound_time
from service.scoring import new_score_ids
from tests.store.dbfixtures import sqlite_url, version_fields

AT = datetime(2026, 3, 1, 8, 30, 15, 123456, tzinfo=UTC)


@pytest.fixture
def sqlite_engine(tmp_path: Path) -> Iterator[Engine]:
    url = sqlite_url(tmp_path)
    upgrade(url)
    engine = make_engine(url)
    yield engine
    engine.dispose()


@pytest.fixture
def pipes(sqlite_engine: Engine) -> RiskModel:
    """Model "pipes" with versions 1 and 2; version 1 is the champion."""
    with Session(sqlite_engine, expire_on_commit=False) as s:
        m = create_model(session=s, name="pipes")
        add_version(session=s, model=m, **version_fields())
        add_version(session=s, model=m, **version_fields(parent_number=1))
        set_champion(session=s, model=m, number=1, reason="first")
        s.commit()
        s.expunge(m)
    return m


def _fresh(engine: Engine, model_id: int, number: int, n: int, checks: int) -> list[FreshRows]:
    at = bound_time(engine.dialect, AT)
    return [
        (i, model_id, number, f'{{"x": {k}}}', 0.1 * k, 0.2, 0.5 + 0.01 * k, at, checks)
        for k, i in enumerate(new_score_ids(n))
    ]


def _stored(engine: Engine) -> list[tuple[Any, ...]]:
    with Session(engine) as s:
        rows = s.execute(select(Score).order_by(Score.id)).scalars()
        return [
            (r.model_id, r.version_number, r.key, r.inputs, r.eta, r.se_eta, r.probability,
             r.created_at)
            for r in rows
        ]  # fmt: skip


def _append(engine: Engine, rows: list[FreshRows]) -> int:
    raw = engine.raw_connection()
    try:
        return append_fresh(raw.driver_connection.cursor(), rows)
    finally:
        raw.close()


def test_appended_rows_read_back_as_the_session_path_writes_them(
    sqlite_engine: Engine, tmp_path: Path, pipes: RiskModel
) -> None:
    rows = _fresh(sqlite_engine, pipes.id, 1, 5, checks=0)
    assert _append(sqlite_engine, rows) == 5
    # the same rows through add_score_batch (SQLAlchemy Core) in a second database
    other_url = sqlite_url(tmp_path, "other.db")
    upgrade(other_url)
    other = make_engine(other_url)
    try:
        with Session(other) as s:
            m = create_model(session=s, name="pipes")
            add_version(session=s, model=m, **version_fields())
            add_score_batch(
                session=s,
                model=m,
                version_number=1,
                ids=[r[0] for r in rows],
                keys=None,
                inputs_json=[r[3] for r in rows],
                eta=[r[4] for r in rows],
                se_eta=[r[5] for r in rows],
                probability=[r[6] for r in rows],
                created_at=AT,
            )
            s.commit()
        assert _stored(sqlite_engine) == _stored(other)
    finally:
        other.dispose()
    assert _stored(sqlite_engine)[0][3] == {"x": 0} and _stored(sqlite_engine)[0][7] == AT


def test_a_champion_claim_goes_in_only_while_it_holds(
    sqlite_engine: Engine, pipes: RiskModel
) -> None:
    claim_1 = _fresh(sqlite_engine, pipes.id, 1, 3, checks=1)  # version 1 is the champion
    claim_2 = _fresh(sqlite_engine, pipes.id, 2, 2, checks=1)  # it is not
    named_2 = _fresh(sqlite_engine, pipes.id, 2, 4, checks=0)  # asked for by number
    assert _append(sqlite_engine, claim_1 + claim_2 + named_2) == 7
    stored = {r[0] for r in _ids(sqlite_engine)}
    assert stored == {r[0] for r in claim_1 + named_2}
    raw = sqlite_engine.raw_connection()
    try:
        cur = raw.driver_connection.cursor()
        firsts = [claim_1[0][0], claim_2[0][0], named_2[0][0]]
        assert present_ids(cur, firsts) == {claim_1[0][0], named_2[0][0]}
        assert present_ids(cur, []) == set()
        assert current_champion_of(cur, pipes.id) == 1
        assert current_champion_of(cur, 999) is None
    finally:
        raw.close()


def _ids(engine: Engine) -> list[tuple[str]]:
    with Session(engine) as s:
        return [(i,) for i in s.scalars(select(Score.id))]


def test_the_statement_is_atomic(sqlite_engine: Engine, pipes: RiskModel) -> None:
    good = _fresh(sqlite_engine, pipes.id, 1, 3, checks=0)
    missing_version = _fresh(sqlite_engine, pipes.id, 7, 1, checks=0)  # no version 7
    with pytest.raises(sqlite3.IntegrityError):
        _append(sqlite_engine, good + missing_version)
    assert _ids(sqlite_engine) == []  # the good rows did not go in either
    assert _append(sqlite_engine, good) == 3


def test_row_count_bounds(sqlite_engine: Engine, pipes: RiskModel) -> None:
    with pytest.raises(ValueError, match="1 to"):
        _append(sqlite_engine, [])
    rows = _fresh(sqlite_engine, pipes.id, 1, APPEND_MAX_ROWS + 1, checks=0)
    with pytest.raises(ValueError, match="1 to"):
        _append(sqlite_engine, rows)
    assert _append(sqlite_engine, rows[:APPEND_MAX_ROWS]) == APPEND_MAX_ROWS  # the most
