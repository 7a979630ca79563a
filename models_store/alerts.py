"""Monitoring alerts: raised when a measure crosses its threshold, closed by ``resolved_at``."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from sqlalchemy import select, update
from sqlalchemy.orm import Session

from models_store._types import utcnow
from models_store.orm import AlertRecord, RiskModel

__all__ = ["add_alert", "close_open_alert", "find_open_alert", "list_alerts", "resolve_alert"]


def add_alert(
    *,
    session: Session,
    model: RiskModel,
    measure: str,
    value: float,
    threshold: float,
    direction: str,
    window: dict[str, Any] | None = None,
    version_number: int | None = None,
    details: dict[str, Any] | None = None,
    raised_at: datetime | None = None,
) -> AlertRecord:
    """Record an open alert (``direction``: e.g. "above" / "below")."""
    alert = AlertRecord(
        model_id=model.id,
        version_number=version_number,
        measure=measure,
        value=float(value),
        threshold=float(threshold),
        direction=direction,
        window=window or {},
        details=details or {},
        raised_at=raised_at or utcnow(),
    )
    session.add(alert)
    session.flush()
    return alert


def find_open_alert(
    *, session: Session, model: RiskModel, measure: str, version_number: int | None = None
) -> AlertRecord | None:
    """The newest unresolved alert on ``measure`` (so a monitor does not raise it twice)."""
    stmt = select(AlertRecord).where(
        AlertRecord.model_id == model.id,
        AlertRecord.measure == measure,
        AlertRecord.resolved_at.is_(None),
    )
    if version_number is not None:
        stmt = stmt.where(AlertRecord.version_number == version_number)
    return session.scalar(stmt.order_by(AlertRecord.id.desc()).limit(1))


def list_alerts(
    *,
    session: Session,
    model: RiskModel,
    open_only: bool = False,
    since: datetime | None = None,
    limit: int | None = None,
) -> list[AlertRecord]:
    """Alerts of ``model``, newest first."""
    stmt = select(AlertRecord).where(AlertRecord.model_id == model.id)
    if open_only:
        stmt = stmt.where(AlertRecord.resolved_at.is_(None))
    if since is not None:
        stmt = stmt.where(AlertRecord.raised_at >= since)
    return list(session.scalars(stmt.order_by(AlertRecord.id.desc()).limit(limit)))


def resolve_alert(
    *, session: Session, alert_id: int, resolved_at: datetime | None = None
) -> AlertRecord | None:
    """Close an alert (idempotent: an already closed alert keeps its first time); None if absent."""
    alert = session.get(AlertRecord, alert_id)
    if alert is not None and alert.resolved_at is None:
        alert.resolved_at = resolved_at or utcnow()
        session.flush()
    return alert


def close_open_alert(*, session: Session, alert_id: int, resolved_at: datetime) -> bool:
    """Set ``resolved_at`` of alert ``alert_id`` if it is still open, in one conditional UPDATE
    (so of two concurrent closers exactly one succeeds); False when it is absent or closed."""
    stmt = (
        update(AlertRecord)
        .where(AlertRecord.id == alert_id, AlertRecord.resolved_at.is_(None))
        .values(resolved_at=resolved_at)
        .execution_options(synchronize_session=False)
    )
    result = session.execute(stmt)
    return bool(getattr(result, "rowcount", 0) == 1)
