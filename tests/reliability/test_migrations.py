"""Migrations from an empty database, and ``riskfit db upgrade`` run twice (second a no-op).

Runs on SQLite and on a fresh PostgreSQL database. The second upgrade must issue no DDL at
all (checked by listening to every statement the engine sends) and leave the schema and the
Alembic revision exactly as they were; the integrity check passes afterwards.
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from sqlalchemy import event, inspect
from sqlalchemy.engine import Engine

from models_store import check_integrity, current_revision, head_revision, upgrade
from models_store.orm import Base
from tests.reliability._server import riskfit_cli

DDL = ("CREATE", "ALTER", "DROP")


def schema_of(engine: Engine) -> dict[str, Any]:
    """Tables with their columns, unique constraints, foreign keys and indexes."""
    insp = inspect(engine)
    return {
        t: {
            "columns": sorted(
                (c["name"], str(c["type"]), c["nullable"]) for c in insp.get_columns(t)
            ),
            "unique": sorted(tuple(u["column_names"]) for u in insp.get_unique_constraints(t)),
            "fks": sorted(
                (tuple(f["constrained_columns"]), f["referred_table"])
                for f in insp.get_foreign_keys(t)
            ),
            "indexes": sorted(tuple(i["column_names"]) for i in insp.get_indexes(t)),
        }
        for t in sorted(insp.get_table_names())
    }


def test_migrations_from_empty_reach_every_table(
    database_url: str, engine_for: Callable[[str], Engine]
) -> None:
    engine = engine_for(database_url)
    assert current_revision(engine) is None
    upgrade(engine)
    assert current_revision(engine) == head_revision()
    tables = set(inspect(engine).get_table_names())
    assert set(Base.metadata.tables) <= tables, set(Base.metadata.tables) - tables
    # every ORM column exists in the migrated table (the migration and the ORM agree)
    insp = inspect(engine)
    for name, table in Base.metadata.tables.items():
        migrated = {c["name"] for c in insp.get_columns(name)}
        assert {c.name for c in table.columns} <= migrated, name


def test_cli_upgrade_twice_second_is_a_no_op(
    database_url: str, engine_for: Callable[[str], Engine]
) -> None:
    first = riskfit_cli("db", "upgrade", "--database-url", database_url, database_url=database_url)
    assert first.returncode == 0, first.stderr
    assert head_revision() in first.stdout
    engine = engine_for(database_url)
    before = schema_of(engine)

    statements: list[str] = []

    def remember(_conn: Any, _cursor: Any, statement: str, *_: Any) -> None:
        statements.append(statement)

    event.listen(engine, "before_cursor_execute", remember)
    upgrade(engine)  # the same code path as the CLI, on an engine we can listen to
    event.remove(engine, "before_cursor_execute", remember)
    ddl = [s for s in statements if s.lstrip().upper().startswith(DDL)]
    assert ddl == [], ddl

    second = riskfit_cli("db", "upgrade", "--database-url", database_url, database_url=database_url)
    assert second.returncode == 0, second.stderr
    assert schema_of(engine) == before
    assert current_revision(engine) == head_revision()
    assert check_integrity(engine) == []  # what `riskfit db check` reports
