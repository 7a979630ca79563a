"""Refit runs and the per-model refit lock.

Lock protocol (works alike on SQLite and PostgreSQL, across processes and hosts):

1. :func:`acquire_refit_lock` runs its own short transaction on the *engine*: it deletes the
   model's ``refit_lock`` row if that row has expired (its holder died, e.g. kill -9), then
   inserts a new row whose primary key is the model id. A second inserter violates the primary
   key and gets :class:`RefitInProgressError`. Still in that transaction, runs left ``running``
   by a dead holder are marked ``failed`` (only the lock holder may have a running run).
2. The holder does its work (read data, fit, store the version in short sessions) and may
   extend the lease with :func:`refresh_refit_lock`.
3. :func:`release_refit_lock` deletes the row if the token still matches.

Acquire the lock *before* opening the request's write session: on SQLite a session that has
begun holds the database's write lock, and the lock's own transaction would wait for it.
"""

from __future__ import annotations

import contextlib
import uuid
from collections.abc import Iterator
from datetime import datetime, timedelta
from typing import Any

from sqlalchemy import delete, insert, select, update
from sqlalchemy.engine import Engine
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from models_store._types import utcnow
from models_store.orm import REFIT_STATUSES, RefitLock, RefitRun, RiskModel
from service.errors import RefitInProgressError

__all__ = [
    "DEFAULT_LOCK_TTL_SECONDS",
    "acquire_refit_lock",
    "find_refit_run",
    "finish_refit_run",
    "get_refit_run",
    "list_refit_runs",
    "refit_lock",
    "refresh_refit_lock",
    "release_refit_lock",
    "start_refit_run",
]

DEFAULT_LOCK_TTL_SECONDS = 3600.0


def acquire_refit_lock(
    *,
    engine: Engine,
    model_id: int,
    ttl_seconds: float = DEFAULT_LOCK_TTL_SECONDS,
    now: datetime | None = None,
) -> str:
    """Take the model's refit lock for ``ttl_seconds``; returns the token that releases it."""
    at = now or utcnow()
    token = str(uuid.uuid4())
    try:
        with engine.begin() as conn:
            conn.execute(
                delete(RefitLock).where(RefitLock.model_id == model_id, RefitLock.expires_at < at)
            )
            conn.execute(
                insert(RefitLock).values(
                    model_id=model_id,
                    token=token,
                    acquired_at=at,
                    expires_at=at + timedelta(seconds=ttl_seconds),
                )
            )
            conn.execute(
                update(RefitRun)
                .where(RefitRun.model_id == model_id, RefitRun.status == "running")
                .values(
                    status="failed",
                    finished_at=at,
                    result={"error": "abandoned: its process ended without finishing"},
                )
            )
    except IntegrityError as error:
        with engine.connect() as conn:
            held = conn.execute(
                select(RefitLock.acquired_at, RefitLock.expires_at).where(
                    RefitLock.model_id == model_id
                )
            ).first()
        if held is None:
            raise
        raise RefitInProgressError(
            "a refit of this model is already running",
            field="model",
            value=model_id,
            remedy="wait for it to finish (see GET .../refits), then retry",
            details={"since": held[0].isoformat(), "lease_expires": held[1].isoformat()},
        ) from error
    return token


def refresh_refit_lock(
    *, engine: Engine, model_id: int, token: str, ttl_seconds: float = DEFAULT_LOCK_TTL_SECONDS
) -> bool:
    """Extend the lease of a held lock; False if ``token`` no longer holds it."""
    with engine.begin() as conn:
        result = conn.execute(
            update(RefitLock)
            .where(RefitLock.model_id == model_id, RefitLock.token == token)
            .values(expires_at=utcnow() + timedelta(seconds=ttl_seconds))
        )
        return result.rowcount == 1


def release_refit_lock(*, engine: Engine, model_id: int, token: str) -> bool:
    """Release the lock if ``token`` still holds it; returns whether a row was removed."""
    with engine.begin() as conn:
        result = conn.execute(
            delete(RefitLock).where(RefitLock.model_id == model_id, RefitLock.token == token)
        )
        return result.rowcount == 1


@contextlib.contextmanager
def refit_lock(
    *, engine: Engine, model_id: int, ttl_seconds: float = DEFAULT_LOCK_TTL_SECONDS
) -> Iterator[str]:
    """``with refit_lock(engine=..., model_id=...) as token:`` hold the lock for the block."""
    token = acquire_refit_lock(engine=engine, model_id=model_id, ttl_seconds=ttl_seconds)
    try:
        yield token
    finally:
        release_refit_lock(engine=engine, model_id=model_id, token=token)


# --- runs --------------------------------------------------------------------------------------


def start_refit_run(
    *, session: Session, model: RiskModel, request_fingerprint: str, key_id: int | None = None
) -> RefitRun:
    """Record a refit as running (call while holding the lock)."""
    run = RefitRun(
        model_id=model.id,
        status="running",
        request_fingerprint=request_fingerprint,
        key_id=key_id,
        result={},
    )
    session.add(run)
    session.flush()
    return run


def finish_refit_run(
    *, session: Session, run: RefitRun, status: str, result: dict[str, Any]
) -> RefitRun:
    """Close a run as ``succeeded`` or ``failed`` with its decision and reasons."""
    if status not in REFIT_STATUSES or status == "running":
        raise ValueError(f"status must be 'succeeded' or 'failed', not {status!r}")
    run.status = status
    run.result = result
    run.finished_at = utcnow()
    session.flush()
    return run


def get_refit_run(*, session: Session, model: RiskModel, run_id: int) -> RefitRun | None:
    """Run ``run_id`` of ``model``, or None."""
    run = session.get(RefitRun, run_id)
    return run if run is not None and run.model_id == model.id else None


def find_refit_run(
    *, session: Session, model: RiskModel, request_fingerprint: str
) -> RefitRun | None:
    """The newest run of ``model`` made from the same request (to answer retries idempotently)."""
    stmt = (
        select(RefitRun)
        .where(RefitRun.model_id == model.id, RefitRun.request_fingerprint == request_fingerprint)
        .order_by(RefitRun.id.desc())
        .limit(1)
    )
    return session.scalar(stmt)


def list_refit_runs(
    *, session: Session, model: RiskModel, limit: int | None = None
) -> list[RefitRun]:
    """Runs of ``model``, newest first."""
    stmt = (
        select(RefitRun)
        .where(RefitRun.model_id == model.id)
        .order_by(RefitRun.id.desc())
        .limit(limit)
    )
    return list(session.scalars(stmt))
