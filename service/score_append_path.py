"""The score-log writer's one-statement path on SQLite (:mod:`models_store.score_append`).

A group of small keyless requests (single records and small batches, the common case) goes
into the score log in one autocommitted statement on a connection the appender keeps, instead
of a session's five driver calls: each call lets go of the GIL and has to win it back from the
busy event loop. Measured with tests/benchmarks/bench_scoring.py: single-record scoring went
from about 2,000 to 3,000 requests/s on one worker.

:meth:`SqliteAppender.append` returns None when the statement cannot settle the group (a
model or version deleted meanwhile: nothing was stored and the session path words each
request's error) and raises :class:`~service.errors.StoreError` for a store failure (busy past
the timeout, disk, missing schema), which then holds for the whole group.
"""

from __future__ import annotations

import contextlib
import sqlite3
from collections.abc import Callable, Sequence
from typing import Any

from sqlalchemy.engine import Engine

from models_store.db import store_unavailable
from models_store.score_append import APPEND_MAX_ROWS, append_requests
from models_store.scores import bound_time
from service.score_rows import ChampionChangedError, ScoreRows

__all__ = ["OWN_STATEMENT_ROWS", "SqliteAppender", "appends_to"]

OWN_STATEMENT_ROWS = 256  # keyless batches this big get a statement with their constants inlined


def appends_to(engine: Engine) -> bool:
    """Whether :class:`SqliteAppender` serves ``engine``: a SQLite database in a file (in memory
    every connection would see a database of its own)."""
    url = engine.url
    return url.get_backend_name() == "sqlite" and url.database not in (None, "", ":memory:")


class SqliteAppender:
    """Appends groups of keyless score rows; used from the writer thread only."""

    def __init__(self, engine: Engine, seen: Callable[[int, int | None], None] | None) -> None:
        self._engine = engine
        self._seen = seen  # told the champion a refused claim met (the version cache)
        self._raw: Any = None  # the pooled connection kept between groups

    @staticmethod
    def takes(group: Sequence[ScoreRows]) -> bool:
        """Every request keyless and small, and the group within one statement's rows."""
        total = 0
        for rows in group:
            if rows.keys is not None or len(rows.ids) >= OWN_STATEMENT_ROWS:
                return False
            total += len(rows.ids)
        return total <= APPEND_MAX_ROWS

    def append(self, group: Sequence[ScoreRows]) -> tuple[int, dict[int, Exception]] | None:
        """(rows inserted, each refused request's error by position), or None (see above)."""
        dialect = self._engine.dialect
        try:
            cursor = self._cursor()
            requests = [rows.fresh(bound_time(dialect, rows.created_at)) for rows in group]
            inserted, refused = append_requests(cursor, requests)
        except sqlite3.OperationalError as error:  # busy past the timeout, disk, schema
            self.close()
            raise store_unavailable(str(error), "sqlite") from error
        except sqlite3.Error:  # e.g. a foreign key: a model or version deleted meanwhile
            self.close()
            return None
        errors: dict[int, Exception] = {}
        for i, number in refused.items():
            model_id = group[i].model.id
            if self._seen is not None:
                self._seen(model_id, number)
            errors[i] = ChampionChangedError(model_id, number)
        return inserted, errors

    def close(self) -> None:
        """Let go of the kept connection (invalidated: its state after an error is unknown)."""
        raw, self._raw = self._raw, None
        if raw is not None:
            with contextlib.suppress(Exception):
                raw.invalidate()

    def _cursor(self) -> Any:
        if self._raw is None:
            self._raw = self._engine.raw_connection()  # the pool's connect hooks set pragmas
        return self._raw.driver_connection.cursor()
