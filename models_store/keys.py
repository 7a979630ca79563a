"""API keys: stored as hashes only (hashing and comparison belong to the service)."""

from __future__ import annotations

from datetime import datetime, timedelta

from sqlalchemy import select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from models_store._types import utcnow
from models_store.orm import ROLES, ApiKey
from service.errors import ConflictError, InvalidInputError

__all__ = [
    "create_key",
    "find_key_by_hash",
    "get_key",
    "list_keys",
    "revoke_key",
    "touch_key",
]

TOUCH_INTERVAL = timedelta(seconds=60)  # last_used_at is refreshed at most once a minute


def create_key(*, session: Session, name: str, role: str, key_hash: str, prefix: str) -> ApiKey:
    """Store a new key's hash; :class:`InvalidInputError` for an unknown role."""
    if role not in ROLES:
        raise InvalidInputError(
            f"unknown role {role!r}",
            field="role",
            value=role,
            remedy=f"use one of {', '.join(ROLES)}",
        )
    key = ApiKey(name=name, role=role, key_hash=key_hash, prefix=prefix)
    try:
        with session.begin_nested():
            session.add(key)
    except IntegrityError as error:
        raise ConflictError(
            "a key with this hash already exists",
            field="key_hash",
            remedy="generate a new random key",
        ) from error
    return key


def find_key_by_hash(*, session: Session, key_hash: str, active_only: bool = True) -> ApiKey | None:
    """The key whose hash is ``key_hash`` (by default only if not revoked), or None."""
    stmt = select(ApiKey).where(ApiKey.key_hash == key_hash)
    if active_only:
        stmt = stmt.where(ApiKey.revoked_at.is_(None))
    return session.scalar(stmt)


def get_key(*, session: Session, key_id: int) -> ApiKey | None:
    """The key with id ``key_id``, or None."""
    return session.get(ApiKey, key_id)


def list_keys(*, session: Session, include_revoked: bool = True) -> list[ApiKey]:
    """Keys in creation order."""
    stmt = select(ApiKey).order_by(ApiKey.id)
    if not include_revoked:
        stmt = stmt.where(ApiKey.revoked_at.is_(None))
    return list(session.scalars(stmt))


def revoke_key(*, session: Session, key_id: int, at: datetime | None = None) -> ApiKey | None:
    """Revoke a key (idempotent: the first revocation time is kept); None if absent."""
    key = session.get(ApiKey, key_id)
    if key is not None and key.revoked_at is None:
        key.revoked_at = at or utcnow()
        session.flush()
    return key


def touch_key(*, session: Session, key: ApiKey, at: datetime | None = None) -> bool:
    """Refresh ``last_used_at`` unless done within :data:`TOUCH_INTERVAL`; True if written.

    Rate-limited so that read-only requests do not each turn into a write.
    """
    now = at or utcnow()
    if key.last_used_at is not None and now - key.last_used_at < TOUCH_INTERVAL:
        return False
    key.last_used_at = now
    session.flush()
    return True
