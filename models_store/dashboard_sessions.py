"""Dashboard sessions: stored as token hashes only (the token is made by the service).

A session is live while ``expires_at`` is in the future, ``revoked_at`` is unset and its API
key is not revoked; :func:`live_session` checks all three in one statement.
"""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import delete, select, update
from sqlalchemy.orm import Session

from models_store._types import utcnow
from models_store.orm import ApiKey, DashboardSession

__all__ = [
    "create_session",
    "end_session",
    "end_sessions_of_key",
    "live_session",
    "purge_sessions",
]


def create_session(
    *, session: Session, token_hash: str, key_id: int, expires_at: datetime
) -> DashboardSession:
    """Store a new sign-in of key ``key_id``; no commit. Expired rows are purged first."""
    purge_sessions(session=session)
    row = DashboardSession(token_hash=token_hash, key_id=key_id, expires_at=expires_at)
    session.add(row)
    session.flush()
    return row


def live_session(
    *, session: Session, token_hash: str, now: datetime | None = None
) -> tuple[DashboardSession, ApiKey] | None:
    """The session with ``token_hash`` and its key if the session is live, else None."""
    now = now or utcnow()
    stmt = (
        select(DashboardSession, ApiKey)
        .join(ApiKey, ApiKey.id == DashboardSession.key_id)
        .where(
            DashboardSession.token_hash == token_hash,
            DashboardSession.revoked_at.is_(None),
            DashboardSession.expires_at > now,
            ApiKey.revoked_at.is_(None),
        )
    )
    found = session.execute(stmt).first()
    return None if found is None else (found[0], found[1])


def end_session(*, session: Session, token_hash: str, at: datetime | None = None) -> bool:
    """Revoke the session with ``token_hash`` (idempotent); True if one was live. No commit."""
    result = session.execute(
        update(DashboardSession)
        .where(DashboardSession.token_hash == token_hash, DashboardSession.revoked_at.is_(None))
        .values(revoked_at=at or utcnow())
    )
    return bool(getattr(result, "rowcount", 0))


def end_sessions_of_key(*, session: Session, key_id: int, at: datetime | None = None) -> int:
    """Revoke every live session of key ``key_id``; how many. No commit."""
    result = session.execute(
        update(DashboardSession)
        .where(DashboardSession.key_id == key_id, DashboardSession.revoked_at.is_(None))
        .values(revoked_at=at or utcnow())
    )
    return int(getattr(result, "rowcount", 0))


def purge_sessions(*, session: Session, now: datetime | None = None) -> None:
    """Delete sessions that expired (they can never be honoured again). No commit."""
    session.execute(
        delete(DashboardSession).where(DashboardSession.expires_at <= (now or utcnow()))
    )
