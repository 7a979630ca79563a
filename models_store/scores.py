"""The score log: bulk insert, look-ups, counts (columnar reads live in models_store.columns)."""

from __future__ import annotations

import functools
import itertools
import uuid
from collections.abc import Mapping, Sequence
from datetime import datetime
from typing import Any, TypedDict, Unpack, cast

from sqlalchemy import Select, Table, func, insert, select
from sqlalchemy.engine import Dialect
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from models_store._types import utcnow
from models_store._util import chunks, window
from models_store.columns import ScoreColumns, scores_with_outcomes  # re-exported
from models_store.orm import RiskModel, Score
from models_store.versions import require_version
from service.errors import DuplicateKeyError

__all__ = [
    "ScoreBatch",
    "ScoreColumns",
    "ScoreParams",
    "add_score_batch",
    "add_scores",
    "bound_time",
    "checkpoint_wal",
    "count_scores",
    "find_scores_by_keys",
    "get_score",
    "get_scores",
    "insert_fresh_scores",
    "insert_score_params",
    "new_score_id",
    "score_inputs",
    "score_rows_params",
    "scores_with_outcomes",
]


class ScoreBatch(TypedDict):
    """One batch of score-log rows by column (each of one length; ``keys`` None: no keys)."""

    version_number: int
    ids: Sequence[str]
    keys: Sequence[str | None] | None
    inputs_json: Sequence[str]  # each row's inputs as a JSON object (finite numbers only)
    eta: Sequence[float]
    se_eta: Sequence[float]
    probability: Sequence[float]
    created_at: datetime


_TABLE = cast(Table, Score.__table__)  # Core inserts, no ORM bookkeeping
_ROWS_PER_STATEMENT = 100  # SQLite multi-row inserts: 500 bound values (the limit is 32,766)


def new_score_id() -> str:
    """A fresh score id (random UUID, 36 characters)."""
    return str(uuid.uuid4())


def add_scores(
    *,
    session: Session,
    model: RiskModel,
    version_number: int,
    rows: Sequence[Mapping[str, Any]],
    created_at: datetime | None = None,
) -> list[str]:
    """Log one score per row and return their ids (in row order).

    Each row: ``inputs`` (dict), ``eta``, ``se_eta``, ``probability``, optional ``key`` and
    ``id``. Keys must be new for the model and distinct within ``rows``: otherwise
    :class:`DuplicateKeyError` lists them (``details["keys"]``, ``details["indices"]``) before
    anything is written. One Core executemany INSERT per chunk (no ORM objects or bookkeeping).
    """
    require_version(session=session, model=model, number=version_number)
    _refuse_duplicate_keys(session, model, rows)
    at = created_at or utcnow()
    values = [
        {
            "id": row.get("id") or new_score_id(),
            "model_id": model.id,
            "version_number": version_number,
            "key": row.get("key"),
            "inputs": row["inputs"],
            "eta": float(row["eta"]),
            "se_eta": float(row["se_eta"]),
            "probability": float(row["probability"]),
            "created_at": at,
        }
        for row in rows
    ]
    # Insert keyed rows in key order so that concurrent writers lock keys in one order.
    ordered = sorted(values, key=lambda v: (v["key"] is None, v["key"] or ""))
    try:
        with session.begin_nested():
            conn = session.connection()  # Core executemany: no ORM bookkeeping per row
            for part in chunks(ordered):
                conn.execute(insert(_TABLE), list(part))
    except IntegrityError as error:  # a key taken concurrently (PostgreSQL)
        keys = [str(v["key"]) for v in values if v["key"] is not None]
        taken = _existing_keys(session, model, keys)
        if not taken:
            raise
        raise _duplicate([k for k in keys if k in taken], rows) from error
    return [str(v["id"]) for v in values]


def add_score_batch(*, session: Session, model: RiskModel, **batch: Unpack[ScoreBatch]) -> None:
    """Columnar :func:`add_scores` for large batches: same checks, same rows, less per-row work.

    ``inputs_json``: each row's inputs as a JSON object (finite numbers only); ``keys`` None:
    no row has one. Rows go to the driver as plain tuples. The caller has checked that the
    version exists. Keyed rows are inserted in a SAVEPOINT (a key taken concurrently refuses
    only this batch); rows without keys need none (:func:`insert_fresh_scores`: any failure
    there is the store's, the caller rolls back).
    """
    keys = batch["keys"]
    if keys is None:  # fresh ids only: nothing a SAVEPOINT would have to undo on its own
        insert_fresh_scores(session=session, model_id=model.id, **batch)
        return
    rows_for_errors = [{"key": k} for k in keys]
    _refuse_duplicate_keys(session, model, rows_for_errors)
    params = score_rows_params(dialect=session.get_bind().dialect, model_id=model.id, **batch)
    params.sort(key=lambda r: (r[3] is None, r[3] or ""))  # concurrent writers: one key order
    try:
        with session.begin_nested():
            insert_score_params(session=session, params=params)
    except IntegrityError as error:  # a key taken concurrently (PostgreSQL)
        wanted = [str(k) for k in keys if k is not None]
        taken = _existing_keys(session, model, wanted)
        if not taken:
            raise
        raise _duplicate([k for k in wanted if k in taken], rows_for_errors) from error


ScoreParams = tuple[str, int, int, str | None, str, float, float, float, Any]


def score_rows_params(
    *, dialect: Dialect, model_id: int, **batch: Unpack[ScoreBatch]
) -> list[ScoreParams]:
    """Rows as driver tuples ``(id, model_id, version_number, key, inputs, eta, se_eta,
    probability, created_at)``; the time converted once by the column type (no checks)."""
    n = len(batch["ids"])
    at = [bound_time(dialect, batch["created_at"])] * n
    ints = ([model_id] * n, [batch["version_number"]] * n)
    keys = batch["keys"] or [None] * n
    numbers = (batch["eta"], batch["se_eta"], batch["probability"])
    columns = (batch["ids"], *ints, keys, batch["inputs_json"], *numbers, at)
    return list(zip(*columns, strict=True))


def insert_score_params(*, session: Session, params: Sequence[ScoreParams]) -> None:
    """Insert :func:`score_rows_params` rows unchecked (no SAVEPOINT): one ``executemany``
    per :func:`~models_store._util.chunks` slice, shared by the rows of many requests."""
    conn = session.connection()
    sql = _insert_sql(conn.dialect)
    for part in chunks(params):
        conn.exec_driver_sql(sql, list(part))


def insert_fresh_scores(*, session: Session, model_id: int, **batch: Unpack[ScoreBatch]) -> None:
    """Insert one batch of rows without keys (one model, version and time), unchecked.

    SQLite: the constants (model, version, NULL key, time) are written into the statement, so
    a row binds 5 values, not 9, and a statement inserts :data:`_ROWS_PER_STATEMENT` rows:
    10,000 rows in about 14 ms instead of 26 (in memory). Elsewhere :func:`score_rows_params`.
    """
    if batch["keys"] is not None:
        raise ValueError("insert_fresh_scores takes rows without keys (add_score_batch checks)")
    conn = session.connection()
    if conn.dialect.name != "sqlite":
        params = score_rows_params(dialect=conn.dialect, model_id=model_id, **batch)
        insert_score_params(session=session, params=params)
        return
    at = bound_time(conn.dialect, batch["created_at"])
    if not isinstance(at, str) or "'" in at:
        raise TypeError(f"unexpected SQLite time text {at!r}")
    columns = [batch[c] for c in ("ids", "inputs_json", "eta", "se_eta", "probability")]
    n = len(batch["ids"])
    step, whole = _ROWS_PER_STATEMENT, n - n % _ROWS_PER_STATEMENT
    constants = (int(model_id), int(batch["version_number"]), at)
    # flat rows built slice by slice: no 10,000 row tuples alive at once for the GC to scan
    flat = [
        tuple(itertools.chain.from_iterable(zip(*(c[i : i + step] for c in columns), strict=True)))
        for i in range(0, whole, step)
    ]
    if flat:
        conn.exec_driver_sql(_fresh_sql(conn.dialect, step) % (constants * step), flat)
    if whole < n:
        rest = list(zip(*(c[whole:] for c in columns), strict=True))
        conn.exec_driver_sql(_fresh_sql(conn.dialect, 1) % constants, rest)


def checkpoint_wal(session: Session) -> None:
    """SQLite: copy the write-ahead log into the database file now (``PASSIVE``: no waiting).

    Else SQLite does it in the COMMIT that takes the log over 1,000 pages, while a request
    waits; the score writer calls this after answering. In a transaction of its own that
    reads nothing (a checkpoint cannot follow a read in one). Elsewhere a no-op.
    """
    if session.get_bind().dialect.name == "sqlite":
        session.connection().exec_driver_sql("PRAGMA wal_checkpoint(PASSIVE)")
        session.commit()


def bound_time(dialect: Dialect, created_at: datetime) -> Any:
    """``created_at`` as the driver receives it: the column type's full bind processing for
    ``dialect`` (on SQLite the text with six fraction digits that Core inserts write), once."""
    process = _time_processor(dialect)
    return process(created_at) if process is not None else created_at


@functools.lru_cache(maxsize=8)
def _time_processor(dialect: Dialect) -> Any:
    return _TABLE.c.created_at.type.dialect_impl(dialect).bind_processor(dialect)


@functools.lru_cache(maxsize=8)
def _fresh_sql(dialect: Dialect, rows: int) -> str:
    """SQLite INSERT of ``rows`` rows, each with ``%d, %d, '%s'`` for model id, version, time."""
    values = ", ".join(["(?, %d, %d, NULL, ?, ?, ?, ?, '%s')"] * rows)
    return f"{_insert_into(dialect)} VALUES {values}"


@functools.lru_cache(maxsize=8)
def _insert_sql(dialect: Dialect) -> str:
    mark = "?" if dialect.paramstyle == "qmark" else "%s"
    return f"{_insert_into(dialect)} VALUES ({', '.join([mark] * 9)})"


def _insert_into(dialect: Dialect) -> str:
    quote = dialect.identifier_preparer.quote
    names = ("id", "model_id", "version_number", "key", "inputs", "eta", "se_eta")
    columns = ", ".join(quote(c) for c in (*names, "probability", "created_at"))
    return f"INSERT INTO {quote(_TABLE.name)} ({columns})"


def _refuse_duplicate_keys(
    session: Session, model: RiskModel, rows: Sequence[Mapping[str, Any]]
) -> None:
    keys = [str(row["key"]) for row in rows if row.get("key") is not None]
    if not keys:
        return
    seen: set[str] = set()
    repeated = [k for k in keys if k in seen or seen.add(k)]  # type: ignore[func-returns-value]
    existing = _existing_keys(session, model, keys)
    bad = sorted(set(repeated) | existing)
    if bad:
        raise _duplicate(bad, rows)


def _existing_keys(session: Session, model: RiskModel, keys: Sequence[str]) -> set[str]:
    found: set[str] = set()
    for part in chunks(sorted(set(keys))):
        stmt = select(Score.key).where(Score.model_id == model.id, Score.key.in_(part))
        found.update(k for k in session.scalars(stmt) if k is not None)
    return found


def _duplicate(keys: Sequence[str], rows: Sequence[Mapping[str, Any]]) -> DuplicateKeyError:
    wanted = set(keys)
    indices = [i for i, row in enumerate(rows) if row.get("key") in wanted]
    first = indices[0] if indices else 0
    return DuplicateKeyError(
        f"{len(wanted)} key(s) already used for this model or repeated in the request; "
        "nothing was stored",
        field=f"records[{first}].key",
        value=keys[0] if keys else None,
        remedy="send each key once; a key names one score for good (omit it to log without one)",
        details={"keys": sorted(wanted), "indices": indices},
    )


def find_scores_by_keys(
    *, session: Session, model: RiskModel, keys: Sequence[str]
) -> dict[str, Score]:
    """Stored scores of ``model`` whose key is in ``keys``, by key."""
    found: dict[str, Score] = {}
    unique = sorted(set(keys))
    for part in chunks(unique):
        stmt = select(Score).where(Score.model_id == model.id, Score.key.in_(part))
        found.update({s.key: s for s in session.scalars(stmt) if s.key is not None})
    return found


def get_score(*, session: Session, model: RiskModel, score_id: str) -> Score | None:
    """One score of ``model`` by id, or None (also None for another model's score)."""
    score = session.get(Score, score_id)
    return score if score is not None and score.model_id == model.id else None


def get_scores(*, session: Session, model: RiskModel, score_ids: Sequence[str]) -> dict[str, Score]:
    """Stored scores of ``model`` among ``score_ids``, by id (unknown ids are absent).

    Looked up by primary key alone, the model checked in Python (see outcomes._resolve).
    """
    found: dict[str, Score] = {}
    for part in chunks(sorted(set(score_ids))):
        stmt = select(Score).where(Score.id.in_(part))
        found.update({s.id: s for s in session.scalars(stmt) if s.model_id == model.id})
    return found


# --- reads for monitoring -------------------------------------------------------------------


def _score_window(stmt: Select[Any], *, model: RiskModel, **kw: Any) -> Select[Any]:
    return window(
        stmt,
        time_col=Score.created_at,
        model_col=Score.model_id,
        version_col=Score.version_number,
        model_id=model.id,
        **kw,
    )


def count_scores(
    *,
    session: Session,
    model: RiskModel,
    since: datetime | None = None,
    until: datetime | None = None,
    version: int | None = None,
) -> int:
    """Number of logged scores of ``model`` created in ``[since, until)``."""
    stmt = _score_window(
        select(func.count()).select_from(Score),
        model=model,
        since=since,
        until=until,
        version=version,
    )
    return int(session.scalar(stmt) or 0)


def score_inputs(
    *,
    session: Session,
    model: RiskModel,
    since: datetime | None = None,
    until: datetime | None = None,
    version: int | None = None,
    limit: int | None = None,
) -> list[dict[str, Any]]:
    """The ``inputs`` of scores created in ``[since, until)``, oldest first (for input drift)."""
    stmt = _score_window(
        select(Score.inputs), model=model, since=since, until=until, version=version
    )
    return list(session.scalars(stmt.order_by(Score.created_at).limit(limit)))
