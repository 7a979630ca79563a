"""Alembic environment for riskfit's store.

Run through :func:`models_store.db.upgrade`, which passes an open connection in
``config.attributes["connection"]``; without one (the ``alembic`` command line with
``-x url=...`` or ``sqlalchemy.url``), an engine is made with riskfit's own settings.
"""

from __future__ import annotations

from alembic import context
from sqlalchemy.engine import Connection

from models_store.orm import Base

target_metadata = Base.metadata


def _run(connection: Connection) -> None:
    context.configure(
        connection=connection,
        target_metadata=target_metadata,
        render_as_batch=True,  # ALTERs on SQLite go through table copies
        compare_type=True,
    )
    with context.begin_transaction():
        context.run_migrations()


def run_migrations_online() -> None:
    connection = context.config.attributes.get("connection")
    if connection is not None:
        _run(connection)
        return
    from models_store.db import make_engine

    url = context.get_x_argument(as_dictionary=True).get("url") or context.config.get_main_option(
        "sqlalchemy.url"
    )
    if not url:
        raise RuntimeError("no database: pass -x url=<SQLAlchemy URL> or use models_store.upgrade")
    engine = make_engine(url)
    try:
        with engine.begin() as conn:
            _run(conn)
    finally:
        engine.dispose()


if context.is_offline_mode():
    raise RuntimeError("offline (SQL script) migrations are not supported; run them online")
run_migrations_online()
