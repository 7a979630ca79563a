"""Columnar reads for monitoring: scores joined with outcomes as numpy arrays.

The outcome table carries each score's prediction (see :class:`models_store.orm.Outcome`), so a
calibration window is one single-table query. The rows are turned into arrays without building
per-row ORM objects or datetimes:

* PostgreSQL: ``COPY (SELECT ...) TO STDOUT (FORMAT BINARY)`` through psycopg; every row has
  the same fixed-width layout, read at once with a big-endian structured numpy dtype.
* other backends (SQLite): the driver's tuples, fetched in one call, into one float64 array.

Times travel as integer microseconds since 1970-01-01 UTC, computed exactly in the database.
"""

from __future__ import annotations

import sqlite3
from dataclasses import dataclass
from datetime import datetime
from typing import Any, Literal

import numpy as np
from sqlalchemy import BigInteger, ColumnElement, Float, Integer, Select, SmallInteger, cast, func
from sqlalchemy import select as sa_select
from sqlalchemy.engine import Connection
from sqlalchemy.orm import InstrumentedAttribute, Session

from models_store._util import window
from models_store.orm import Outcome, RiskModel

__all__ = ["ScoreColumns", "WindowOn", "epoch_micros", "scores_with_outcomes"]

WindowOn = Literal["score", "outcome"]

# One row of the binary COPY: int16 field count, then (int32 length, value) per field.
_COPY_ROW = np.dtype(
    [
        ("n_fields", ">i2"),
        ("l_eta", ">i4"), ("eta", ">f8"),
        ("l_se", ">i4"), ("se_eta", ">f8"),
        ("l_p", ">i4"), ("probability", ">f8"),
        ("l_y", ">i4"), ("outcome", ">i2"),
        ("l_ts", ">i4"), ("scored_us", ">i8"),
        ("l_to", ">i4"), ("observed_us", ">i8"),
        ("l_v", ">i4"), ("version", ">i4"),
    ]
)  # fmt: skip
_COPY_SIGNATURE = b"PGCOPY\n\xff\r\n\x00"
_COPY_HEADER = 19  # signature (11) + int32 flags + int32 header-extension length
_COPY_TRAILER = 2  # int16 -1


@dataclass(frozen=True)
class ScoreColumns:
    """Scores joined with their outcomes, as arrays of shape (n,) in window-time order.

    ``created_at`` (the score's time) and ``observed_at`` are ``datetime64[us]`` in UTC (numpy
    has no zones). Field order is part of the interface.
    """

    eta: np.ndarray
    se_eta: np.ndarray
    probability: np.ndarray
    outcome: np.ndarray  # int8, 0/1
    created_at: np.ndarray
    observed_at: np.ndarray
    version: np.ndarray  # int32

    @property
    def n(self) -> int:
        return int(self.eta.shape[0])


def epoch_micros(column: InstrumentedAttribute[datetime], dialect: str) -> ColumnElement[int]:
    """Microseconds since 1970-01-01 UTC, computed exactly in the database.

    SQLite keeps the time as text ``YYYY-MM-DD HH:MM:SS[.ffffff]``: whole seconds from
    ``unixepoch()`` (SQLite 3.38+, about twice as fast) or ``strftime('%s')`` plus the fraction
    digits. PostgreSQL: ``extract`` gives exact numeric seconds. The values (~1.7e15) are also
    exact in float64 (below 2**53).
    """
    if dialect == "sqlite":
        new_enough = sqlite3.sqlite_version_info >= (3, 38, 0)
        whole = func.unixepoch(column) if new_enough else func.strftime("%s", column)
        seconds = cast(whole, BigInteger)
        return seconds * 1_000_000 + cast(func.substr(column, 21, 6), BigInteger)
    return cast(func.extract("epoch", column) * 1_000_000, BigInteger)


def scores_with_outcomes(
    *,
    session: Session,
    model: RiskModel,
    since: datetime | None = None,
    until: datetime | None = None,
    on: WindowOn = "score",
    version: int | None = None,
) -> ScoreColumns:
    """Every score of ``model`` that has an outcome, within ``[since, until)`` (aware datetimes).

    ``on="score"`` windows and orders by the score's ``created_at``, ``on="outcome"`` by the
    outcome's ``observed_at``; ``version`` keeps one version's scores. One query; time order by
    a stable numpy sort (ties in time keep no particular order).
    """
    if on not in ("score", "outcome"):
        raise ValueError(f"on must be 'score' or 'outcome', not {on!r}")
    conn = session.connection()
    dialect = conn.dialect.name
    stmt = sa_select(
        cast(Outcome.eta, Float(53)),
        cast(Outcome.se_eta, Float(53)),
        cast(Outcome.probability, Float(53)),
        cast(Outcome.outcome, SmallInteger),
        epoch_micros(Outcome.scored_at, dialect),
        epoch_micros(Outcome.observed_at, dialect),
        cast(Outcome.version_number, Integer),
    )
    stmt = window(
        stmt,
        time_col=Outcome.scored_at if on == "score" else Outcome.observed_at,
        model_col=Outcome.model_id,
        version_col=Outcome.version_number,
        model_id=model.id,
        since=since,
        until=until,
        version=version,
    )
    fetch = _fetch_postgres_binary if dialect == "postgresql" else _fetch_tuples
    cols = fetch(conn, stmt)
    order = np.argsort(cols["scored_us" if on == "score" else "observed_us"], kind="stable")
    return ScoreColumns(
        eta=np.ascontiguousarray(cols["eta"][order], dtype=np.float64),
        se_eta=np.ascontiguousarray(cols["se_eta"][order], dtype=np.float64),
        probability=np.ascontiguousarray(cols["probability"][order], dtype=np.float64),
        outcome=cols["outcome"][order].astype(np.int8),
        created_at=cols["scored_us"][order].astype(np.int64).view("datetime64[us]"),
        observed_at=cols["observed_us"][order].astype(np.int64).view("datetime64[us]"),
        version=cols["version"][order].astype(np.int32),
    )


_NAMES = ("eta", "se_eta", "probability", "outcome", "scored_us", "observed_us", "version")


def _fetch_tuples(conn: Connection, stmt: Select[Any]) -> dict[str, np.ndarray]:
    """Driver tuples (no SQLAlchemy row processing) into one (n, 7) float64 array."""
    result = conn.execute(stmt)
    raw = result.cursor.fetchall() if result.cursor is not None else []
    result.close()
    table = np.array(raw, dtype=np.float64).reshape(-1, len(_NAMES))
    return {name: table[:, i] for i, name in enumerate(_NAMES)}


def _fetch_postgres_binary(conn: Connection, stmt: Select[Any]) -> dict[str, np.ndarray]:
    """Binary COPY of the query, parsed in one ``np.frombuffer`` (psycopg 3 only)."""
    compiled = stmt.compile(dialect=conn.dialect)
    sql = f"COPY ({compiled.string}) TO STDOUT (FORMAT BINARY)"
    buffer = bytearray()
    driver_conn: Any = conn.connection.driver_connection
    with driver_conn.cursor() as cursor, cursor.copy(sql, compiled.params) as copy:
        for block in copy:
            buffer += block
    if bytes(buffer[:11]) != _COPY_SIGNATURE:
        raise RuntimeError("unexpected COPY output (not PostgreSQL's binary format)")
    start = _COPY_HEADER + int.from_bytes(buffer[15:19], "big")  # skip any header extension
    body = memoryview(buffer)[start : len(buffer) - _COPY_TRAILER]
    rows = np.frombuffer(body, dtype=_COPY_ROW)
    if rows.size and (np.any(rows["n_fields"] != len(_NAMES)) or np.any(rows["l_y"] != 2)):
        raise RuntimeError("unexpected COPY row layout (a NULL or a changed column type)")
    return {name: rows[name] for name in _NAMES}
