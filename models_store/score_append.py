"""One-statement appends of fresh score-log rows for the group-commit writer (SQLite).

The writer commits the rows of many small requests together. Through a session that takes a
pool checkout, ``BEGIN IMMEDIATE``, a champion read, an ``executemany`` and ``COMMIT``: five
driver calls, each of which lets go of the GIL and must win it back from the busy event loop
(measured in tests/benchmarks/bench_scoring.py: about 90 us of writer CPU per logged row and
as much again lost by the event loop to the hand-overs). Here the same rows go in one
``INSERT ... SELECT ... FROM (VALUES ...)`` statement on a connection the writer keeps, in
autocommit: SQLite runs a write statement outside ``BEGIN`` as a transaction of its own
(atomic, one fsync, the write lock taken at its start with the busy timeout, like
``BEGIN IMMEDIATE``).

The champion check of :func:`service.score_writer.check_champion` is part of the statement: a
row that claims the champion (``checks = 1``) is inserted only if its version is the newest
``champion_change`` of its model at that moment. All rows of one request share model, version
and claim, so a request goes in whole or not at all; :func:`present_ids` tells which requests
did when fewer rows went in than were sent.

Rows with client keys, big batches and PostgreSQL keep the session path (SAVEPOINTs, the
duplicate-key error naming each key).
"""

from __future__ import annotations

import functools
from collections.abc import Sequence
from typing import Any

from models_store.orm import ChampionChange, Score

__all__ = [
    "APPEND_MAX_ROWS",
    "FreshRows",
    "append_fresh",
    "append_requests",
    "current_champion_of",
    "present_ids",
]

APPEND_MAX_ROWS = 1_000  # rows per statement: 9 bound values each (SQLite allows 32,766)

# (id, model_id, version_number, inputs, eta, se_eta, probability, created_at, checks)
FreshRows = tuple[str, int, int, str, float, float, float, str, int]

_COLUMNS = "id, model_id, version_number, key, inputs, eta, se_eta, probability, created_at"
_SCORE, _CHANGE = Score.__tablename__, ChampionChange.__tablename__


@functools.lru_cache(maxsize=64)
def _append_sql(rows: int) -> str:
    """The INSERT of ``rows`` VALUES rows; SQLite names their columns column1 .. column9."""
    values = ", ".join(["(?, ?, ?, ?, ?, ?, ?, ?, ?)"] * rows)
    champion = (
        f"SELECT c.version_number FROM {_CHANGE} c WHERE c.model_id = v.column2"
        " ORDER BY c.seq DESC LIMIT 1"
    )
    return (
        f"INSERT INTO {_SCORE} ({_COLUMNS}) SELECT v.column1, v.column2, v.column3, NULL,"
        " v.column4, v.column5, v.column6, v.column7, v.column8"
        f" FROM (VALUES {values}) AS v WHERE v.column9 = 0 OR v.column3 = ({champion})"
    )


def append_fresh(cursor: Any, rows: Sequence[FreshRows]) -> int:
    """Insert ``rows`` (at most :data:`APPEND_MAX_ROWS`) in one autocommitted statement.

    ``cursor``: a cursor of a ``sqlite3`` connection outside any transaction (``riskfit``'s
    connections have the driver's own transaction handling off). Returns the number of rows
    inserted: ``len(rows)`` unless some claimed a champion that has changed. Raises the
    driver's error with nothing inserted (the statement is atomic).
    """
    if not 0 < len(rows) <= APPEND_MAX_ROWS:
        raise ValueError(f"append_fresh takes 1 to {APPEND_MAX_ROWS} rows, not {len(rows)}")
    flat = [value for row in rows for value in row]
    cursor.execute(_append_sql(len(rows)), flat)
    return int(cursor.rowcount)


def present_ids(cursor: Any, ids: Sequence[str]) -> set[str]:
    """Which of ``ids`` are in the score log (one indexed look-up each, one statement)."""
    if not ids:
        return set()
    marks = ", ".join(["?"] * len(ids))
    cursor.execute(f"SELECT id FROM {_SCORE} WHERE id IN ({marks})", list(ids))
    return {row[0] for row in cursor.fetchall()}


def current_champion_of(cursor: Any, model_id: int) -> int | None:
    """The champion number of ``model_id`` (None: none, or no such model)."""
    cursor.execute(
        f"SELECT version_number FROM {_CHANGE} WHERE model_id = ? ORDER BY seq DESC LIMIT 1",
        (model_id,),
    )
    row = cursor.fetchone()
    return None if row is None else int(row[0])


def append_requests(
    cursor: Any, requests: Sequence[Sequence[FreshRows]]
) -> tuple[int, dict[int, int | None]]:
    """Append the rows of several requests (at most :data:`APPEND_MAX_ROWS` in all) at once.

    Returns (rows inserted, refused) where ``refused`` maps the position of each request
    whose champion claim did not hold to its model's champion now (None: it has none).
    """
    fresh = [row for rows in requests for row in rows]
    inserted = append_fresh(cursor, fresh)
    if inserted == len(fresh):
        return inserted, {}
    claims = [i for i, rows in enumerate(requests) if rows[0][8]]
    present = present_ids(cursor, [requests[i][0][0] for i in claims])
    champions: dict[int, int | None] = {}
    refused: dict[int, int | None] = {}
    for i in claims:
        first = requests[i][0]
        if first[0] in present:
            continue
        if first[1] not in champions:
            champions[first[1]] = current_champion_of(cursor, first[1])
        refused[i] = champions[first[1]]
    return inserted, refused
