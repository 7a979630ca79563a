"""The score log: bulk insert, look-ups, and columnar reads joined with outcomes."""

from __future__ import annotations

import uuid
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from datetime import datetime
from typing import Any, Literal

import numpy as np
from sqlalchemy import ColumnElement, Float, Select, and_, cast, func, insert, select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import InstrumentedAttribute, Session

from models_store._types import utcnow
from models_store._util import chunks
from models_store.orm import Outcome, RiskModel, Score
from models_store.versions import require_version
from service.errors import DuplicateKeyError

__all__ = [
    "ScoreColumns",
    "add_scores",
    "count_scores",
    "find_scores_by_keys",
    "get_score",
    "get_scores",
    "new_score_id",
    "score_inputs",
    "scores_with_outcomes",
]

WindowOn = Literal["score", "outcome"]


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
                conn.execute(insert(Score.__table__), list(part))
    except IntegrityError as error:  # a key taken concurrently (PostgreSQL)
        keys = [str(v["key"]) for v in values if v["key"] is not None]
        taken = _existing_keys(session, model, keys)
        if not taken:
            raise
        raise _duplicate([k for k in keys if k in taken], rows) from error
    return [str(v["id"]) for v in values]


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
    """Stored scores of ``model`` among ``score_ids``, by id (unknown ids are absent)."""
    found: dict[str, Score] = {}
    for part in chunks(sorted(set(score_ids))):
        stmt = select(Score).where(Score.model_id == model.id, Score.id.in_(part))
        found.update({s.id: s for s in session.scalars(stmt)})
    return found


# --- columnar reads ----------------------------------------------------------------------------


@dataclass(frozen=True)
class ScoreColumns:
    """Scores joined with their outcomes, as arrays of shape (n,) in score-time order.

    ``created_at`` and ``observed_at`` are ``datetime64[us]`` in UTC (numpy has no zones).
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


def _epoch_seconds(column: InstrumentedAttribute[datetime], dialect: str) -> ColumnElement[float]:
    """Seconds since 1970-01-01 UTC computed in the database (no Python datetimes built)."""
    if dialect == "sqlite":  # stored as naive UTC text; julianday has millisecond resolution
        return (func.julianday(column) - 2440587.5) * 86400.0
    return cast(func.extract("epoch", column), Float)


def _window(
    stmt: Select[Any],
    *,
    model: RiskModel,
    since: datetime | None,
    until: datetime | None,
    on: WindowOn,
    version: int | None,
) -> Select[Any]:
    if on not in ("score", "outcome"):
        raise ValueError(f"on must be 'score' or 'outcome', not {on!r}")
    time_col = Score.created_at if on == "score" else Outcome.observed_at
    model_col = Score.model_id if on == "score" else Outcome.model_id
    conditions: list[ColumnElement[bool]] = [model_col == model.id]
    if since is not None:
        conditions.append(time_col >= since)
    if until is not None:
        conditions.append(time_col < until)
    if version is not None:
        conditions.append(Score.version_number == version)
    return stmt.where(and_(*conditions))


def scores_with_outcomes(
    *,
    session: Session,
    model: RiskModel,
    since: datetime | None = None,
    until: datetime | None = None,
    on: WindowOn = "score",
    version: int | None = None,
) -> ScoreColumns:
    """Every score of ``model`` that has an outcome, within ``[since, until)``.

    ``on="score"`` windows by the score's ``created_at``, ``on="outcome"`` by the outcome's
    ``observed_at``; ``version`` keeps one version's scores. One query; values go from the
    driver's tuples straight into one float64 array (no ORM objects, no datetime objects).
    """
    dialect = session.get_bind().dialect.name
    stmt = select(
        Score.eta,
        Score.se_eta,
        Score.probability,
        Outcome.outcome,
        _epoch_seconds(Score.created_at, dialect),
        _epoch_seconds(Outcome.observed_at, dialect),
        Score.version_number,
    ).join(Outcome, Outcome.score_id == Score.id)
    stmt = _window(stmt, model=model, since=since, until=until, on=on, version=version)
    # Core execution on the session's connection: plain driver tuples, no ORM row processing.
    result = session.connection().execute(stmt.order_by(Score.created_at))
    raw = result.cursor.fetchall() if result.cursor is not None else []
    table = np.array(raw, dtype=np.float64).reshape(-1, 7)
    return ScoreColumns(
        eta=np.ascontiguousarray(table[:, 0]),
        se_eta=np.ascontiguousarray(table[:, 1]),
        probability=np.ascontiguousarray(table[:, 2]),
        outcome=table[:, 3].astype(np.int8),
        created_at=_to_datetime64(table[:, 4]),
        observed_at=_to_datetime64(table[:, 5]),
        version=table[:, 6].astype(np.int32),
    )


def _to_datetime64(seconds: np.ndarray) -> np.ndarray:
    return np.rint(seconds * 1e6).astype(np.int64).view("datetime64[us]")


def count_scores(
    *,
    session: Session,
    model: RiskModel,
    since: datetime | None = None,
    until: datetime | None = None,
    version: int | None = None,
) -> int:
    """Number of logged scores of ``model`` created in ``[since, until)``."""
    stmt = _window(
        select(func.count()).select_from(Score),
        model=model,
        since=since,
        until=until,
        on="score",
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
    stmt = _window(
        select(Score.inputs), model=model, since=since, until=until, on="score", version=version
    )
    return list(session.scalars(stmt.order_by(Score.created_at).limit(limit)))
