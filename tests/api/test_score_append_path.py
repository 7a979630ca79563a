"""The score-log writer's one-statement path on SQLite (service.score_append_path).

The writer's group of small keyless requests goes in one statement; what that statement
cannot settle must end exactly as on the session path: a refused champion claim refuses that
request only, a store failure refuses the whole group with nothing stored (and the next
group works again), a vanished version sends the group to the session path.
"""

from __future__ import annotations

import sqlite3
from datetime import UTC, datetime

import pytest

from models_store import make_engine
from service.errors import StoreError
from service.score_append_path import SqliteAppender, appends_to
from service.score_rows import ChampionChangedError, ScoreRows
from service.score_writer import ScoreLogWriter
from service.scoring import new_score_ids
from tests.api._score_log import score_count, score_rows, two_versions_on_sqlite
from tests.api.conftest import ApiClient

FIT = "/risk-models/water-mains/versions"


def test_a_refused_claim_refuses_only_its_own_request(api: ApiClient) -> None:
    model = two_versions_on_sqlite(api)
    appender = SqliteAppender(api.app.state.engine, None)
    try:
        group = [
            score_rows(model, 1, 3),
            score_rows(model, 2, 2),
            score_rows(model, 2, 4, claims=False),
        ]
        assert appender.takes(group)
        outcome = appender.append(group)
    finally:
        appender.close()
    assert outcome is not None
    inserted, errors = outcome
    assert inserted == 7 and list(errors) == [1]
    assert isinstance(errors[1], ChampionChangedError) and errors[1].number == 1
    assert score_count(api) == 7


def test_the_writer_takes_small_keyless_groups_only(api: ApiClient) -> None:
    model = two_versions_on_sqlite(api)
    assert appends_to(api.app.state.engine)
    assert SqliteAppender.takes([score_rows(model, 1, 255)])
    assert not SqliteAppender.takes([score_rows(model, 1, 256)])  # a big batch: its own statement
    keyed = ScoreRows(model, 1, new_score_ids(1), ["k"], ["{}"], [0.1], [0.2], [0.5],
                      datetime.now(UTC))  # fmt: skip
    assert not SqliteAppender.takes([score_rows(model, 1), keyed])
    assert not SqliteAppender.takes([score_rows(model, 1, 200)] * 6)  # over one statement's rows
    writer = ScoreLogWriter(api.app.state.session_factory)
    try:
        writer.write(score_rows(model, 1, 2))
        with pytest.raises(ChampionChangedError) as changed:
            writer.write(score_rows(model, 2))
    finally:
        writer.close()
    assert changed.value.number == 1 and score_count(api) == 2


def test_a_locked_store_fails_the_whole_group_then_recovers(api: ApiClient) -> None:
    model = two_versions_on_sqlite(api)
    engine = make_engine(api.app.state.engine.url, busy_timeout_ms=50)
    appender = SqliteAppender(engine, None)
    holder = sqlite3.connect(engine.url.database, isolation_level=None)
    try:
        holder.execute("BEGIN IMMEDIATE")  # another writer holds the lock past the timeout
        with pytest.raises(StoreError) as failed:
            appender.append([score_rows(model, 1), score_rows(model, 1, 3)])
        assert "locked" in failed.value.message or "busy" in failed.value.message
        holder.execute("ROLLBACK")
        assert score_count(api) == 0
        assert appender.append([score_rows(model, 1)]) == (1, {})  # a fresh connection
    finally:
        holder.close()
        appender.close()
        engine.dispose()
    assert score_count(api) == 1


def test_a_vanished_version_goes_to_the_session_path(api: ApiClient) -> None:
    model = two_versions_on_sqlite(api)
    appender = SqliteAppender(api.app.state.engine, None)
    try:
        assert appender.append([score_rows(model, 1), score_rows(model, 9, claims=False)]) is None
        assert appender.append([score_rows(model, 1)]) == (1, {})
    finally:
        appender.close()
    assert score_count(api) == 1  # the refused statement left nothing


def test_not_on_postgres_or_in_memory(api: ApiClient) -> None:
    engine = api.app.state.engine
    assert appends_to(engine) == (engine.dialect.name == "sqlite")
    memory = make_engine("sqlite://")
    try:
        assert not appends_to(memory)
    finally:
        memory.dispose()
