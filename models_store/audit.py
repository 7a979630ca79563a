"""The audit log: who (key id) did what (action) to which model, and when."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from models_store.orm import AuditEvent

__all__ = ["list_events", "record"]


def record(
    *,
    session: Session,
    action: str,
    key_id: int | None = None,
    model_name: str | None = None,
    details: dict[str, Any] | None = None,
) -> AuditEvent:
    """Append an audit event in the caller's transaction (it commits with the action itself)."""
    event = AuditEvent(action=action, key_id=key_id, model_name=model_name, details=details or {})
    session.add(event)
    session.flush()
    return event


def list_events(
    *,
    session: Session,
    since: datetime | None = None,
    until: datetime | None = None,
    action: str | None = None,
    model_name: str | None = None,
    key_id: int | None = None,
    limit: int | None = 100,
    offset: int = 0,
) -> list[AuditEvent]:
    """Audit events matching the filters, newest first."""
    stmt = select(AuditEvent)
    if since is not None:
        stmt = stmt.where(AuditEvent.at >= since)
    if until is not None:
        stmt = stmt.where(AuditEvent.at < until)
    if action is not None:
        stmt = stmt.where(AuditEvent.action == action)
    if model_name is not None:
        stmt = stmt.where(AuditEvent.model_name == model_name)
    if key_id is not None:
        stmt = stmt.where(AuditEvent.key_id == key_id)
    stmt = stmt.order_by(AuditEvent.id.desc()).offset(offset).limit(limit)
    return list(session.scalars(stmt))
