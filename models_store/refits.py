"""Refit runs and the per-model refit lock: a short lease kept alive by its holder.

Lock protocol (works alike on SQLite and PostgreSQL, across processes and hosts; the
hosts' clocks must agree to well under a lease, as NTP keeps them):

1. :func:`claim_refit` runs one short transaction on the *engine*: it deletes the model's
   ``refit_lock`` row if that row's lease has run out (its holder died, e.g. kill -9, or hung),
   inserts a new row whose primary key is the model id (a second inserter violates the key and
   gets :class:`RefitInProgressError`, 409), marks every run left ``running`` ``failed`` with
   the reason (only a lock holder has a running run: those runs were interrupted), and records
   the new run as ``running``. The claim and its run record are one commit.
2. While the refit works, its holder renews the lease every lease/3 seconds with
   :func:`renew_refit_claim`: one tiny ``UPDATE`` by token in its own transaction
   (``service.refitting.lease`` runs it from a background thread). A holder that stops
   renewing (killed, hung, cut off from the database) loses the lock one lease later.
3. Before its result is stored, :func:`confirm_refit_claim` renews the lease *inside the
   transaction that stores it*, by token: no row (another refit took the lock over) means
   nothing is stored. On PostgreSQL the ``UPDATE`` row-locks the lock row until that commit,
   so a competing claim's ``DELETE`` of an expired row waits and then finds it renewed; on
   SQLite the single write lock orders them the same way.
4. :func:`end_refit_claim` closes the run if it is still ``running`` (failed with its error,
   or deleted when the request was answered from an earlier run) and deletes the lock row if
   the token still holds it, in one transaction.

:func:`acquire_refit_lock`, :func:`refresh_refit_lock`, :func:`release_refit_lock` and
:func:`refit_lock` are the same lock without a run record (tools and tests).

Claim the lock *before* opening the request's write session: on SQLite a session that has
begun writing holds the database's write lock, and the claim's own transaction would wait
for it.
"""

from __future__ import annotations

import contextlib
import uuid
from collections.abc import Iterator
from dataclasses import dataclass
from datetime import datetime, timedelta
from typing import Any

from sqlalchemy import Connection, delete, insert, select, update
from sqlalchemy.engine import Engine
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from models_store._types import utcnow
from models_store.orm import REFIT_STATUSES, RefitLock, RefitRun, RiskModel
from service.errors import RefitInProgressError

__all__ = [
    "DEFAULT_LOCK_TTL_SECONDS",
    "INTERRUPTED_CODE",
    "RefitClaim",
    "acquire_refit_lock",
    "claim_refit",
    "confirm_refit_claim",
    "end_refit_claim",
    "find_refit_run",
    "finish_refit_run",
    "get_refit_run",
    "list_refit_runs",
    "refit_lock",
    "refresh_refit_lock",
    "release_refit_lock",
    "renew_refit_claim",
    "start_refit_run",
]

#: Default lease of the refit lock (seconds); the service's is ``RISKFIT_REFIT_LOCK_LEASE_SECONDS``.
DEFAULT_LOCK_TTL_SECONDS = 60.0
#: ``result["error"]["code"]`` of a run whose holder stopped renewing its lease.
INTERRUPTED_CODE = "refit_interrupted"


@dataclass(frozen=True)
class RefitClaim:
    """A held refit lock and the ``running`` run recorded with it."""

    model_id: int
    token: str
    run_id: int
    lease_seconds: float


def _iso(at: datetime) -> str:
    return at.isoformat().replace("+00:00", "Z")


def _interrupted(expired: Any, at: datetime) -> dict[str, Any]:
    if expired is None:
        message = (
            "interrupted: the refit's process ended without finishing and no lock was held "
            f"for it when the next refit started at {_iso(at)}; nothing was stored"
        )
        details: dict[str, Any] = {"detected_at": _iso(at)}
    else:
        message = (
            "interrupted: the process holding the refit lock stopped renewing it; its lease "
            f"(taken at {_iso(expired.acquired_at)}) ran out at {_iso(expired.expires_at)} "
            f"and the next refit took the lock over at {_iso(at)}; nothing was stored"
        )
        details = {
            "lock_acquired_at": _iso(expired.acquired_at),
            "lease_expired_at": _iso(expired.expires_at),
            "detected_at": _iso(at),
        }
    return {
        "code": INTERRUPTED_CODE,
        "message": message,
        "remedy": "run the refit again (the server log of the process that held the lock "
        "may say why it stopped)",
        "details": details,
    }


def _take(conn: Connection, model_id: int, token: str, at: datetime, lease: float) -> None:
    """Reap an expired lease, insert the lock row, fail the runs left running."""
    expired = conn.execute(
        select(RefitLock.acquired_at, RefitLock.expires_at).where(
            RefitLock.model_id == model_id, RefitLock.expires_at < at
        )
    ).first()
    if expired is not None:
        conn.execute(
            delete(RefitLock).where(RefitLock.model_id == model_id, RefitLock.expires_at < at)
        )
    conn.execute(
        insert(RefitLock).values(
            model_id=model_id,
            token=token,
            acquired_at=at,
            expires_at=at + timedelta(seconds=lease),
        )
    )
    conn.execute(
        update(RefitRun)
        .where(RefitRun.model_id == model_id, RefitRun.status == "running")
        .values(status="failed", finished_at=at, result={"error": _interrupted(expired, at)})
    )


def _refused(engine: Engine, model_id: int, error: IntegrityError) -> RefitInProgressError:
    with engine.connect() as conn:
        held = conn.execute(
            select(RefitLock.acquired_at, RefitLock.expires_at).where(
                RefitLock.model_id == model_id
            )
        ).first()
    if held is None:
        raise error
    return RefitInProgressError(
        "a refit of this model is already running",
        field="model",
        value=model_id,
        remedy="wait for it to finish (see GET .../refits), then retry; a refit whose "
        "process died gives the lock up when its lease runs out (lease_expires)",
        details={"since": _iso(held[0]), "lease_expires": _iso(held[1])},
    )


def claim_refit(
    *,
    engine: Engine,
    model_id: int,
    request_fingerprint: str,
    key_id: int | None = None,
    lease_seconds: float = DEFAULT_LOCK_TTL_SECONDS,
    now: datetime | None = None,
) -> RefitClaim:
    """Take the model's refit lock and record its run as ``running``, in one transaction."""
    at = now or utcnow()
    token = str(uuid.uuid4())
    try:
        with engine.begin() as conn:
            _take(conn, model_id, token, at, lease_seconds)
            run_id = conn.execute(
                insert(RefitRun)
                .values(
                    model_id=model_id,
                    status="running",
                    started_at=at,
                    request_fingerprint=request_fingerprint,
                    key_id=key_id,
                    result={},
                )
                .returning(RefitRun.id)
            ).scalar_one()
    except IntegrityError as error:
        raise _refused(engine, model_id, error) from error
    return RefitClaim(model_id, token, int(run_id), lease_seconds)


def renew_refit_claim(*, engine: Engine, claim: RefitClaim) -> bool:
    """Extend the lease by one lease from now; False if another refit took the lock over."""
    return refresh_refit_lock(
        engine=engine, model_id=claim.model_id, token=claim.token, ttl_seconds=claim.lease_seconds
    )


def confirm_refit_claim(*, session: Session, claim: RefitClaim) -> bool:
    """Renew the lease inside ``session``'s transaction; False: the lock is lost, store nothing.

    Call it as the first write of the transaction that stores the refit's result and commit
    soon after (the lock row stays locked until then on PostgreSQL).
    """
    result = session.execute(
        update(RefitLock)
        .where(RefitLock.model_id == claim.model_id, RefitLock.token == claim.token)
        .values(expires_at=utcnow() + timedelta(seconds=claim.lease_seconds))
        .execution_options(synchronize_session=False)
    )
    return bool(getattr(result, "rowcount", 0) == 1)


def end_refit_claim(
    *,
    engine: Engine,
    claim: RefitClaim,
    error: dict[str, Any] | None = None,
    discard_run: bool = False,
) -> None:
    """Close the run if still ``running`` (``discard_run``: delete it; else failed with
    ``error``) and release the lock if ``claim`` still holds it; one transaction."""
    running = (RefitRun.id == claim.run_id, RefitRun.status == "running")
    with engine.begin() as conn:
        if discard_run:
            conn.execute(delete(RefitRun).where(*running))
        else:
            failure = error or {
                "code": "refit_failed",
                "message": "the refit stopped on an unexpected error; nothing was stored",
                "remedy": "see the server log, then run the refit again",
            }
            conn.execute(
                update(RefitRun)
                .where(*running)
                .values(status="failed", finished_at=utcnow(), result={"error": failure})
            )
        conn.execute(
            delete(RefitLock).where(
                RefitLock.model_id == claim.model_id, RefitLock.token == claim.token
            )
        )


def acquire_refit_lock(
    *,
    engine: Engine,
    model_id: int,
    ttl_seconds: float = DEFAULT_LOCK_TTL_SECONDS,
    now: datetime | None = None,
) -> str:
    """Take the model's refit lock for ``ttl_seconds`` (no run record); returns its token."""
    at = now or utcnow()
    token = str(uuid.uuid4())
    try:
        with engine.begin() as conn:
            _take(conn, model_id, token, at, ttl_seconds)
    except IntegrityError as error:
        raise _refused(engine, model_id, error) from error
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
