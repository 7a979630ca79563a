"""Domain operation: resolve (close) one open alert of a model, audited.

    alert id -> the model's alert (404 if absent or another model's)
             -> conditional close (409 if already resolved, also when a concurrent request
                closed it first) -> audit event ``alert.resolve`` -> commit

Resolving records a person's decision; it does not change what the monitor computes. The
condition that raised the alert is not raised again (its key stays stored); later windows or
CUSUM signals that cross a threshold raise new alerts.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy.orm import Session

from models_store._types import utcnow
from models_store.alerts import close_open_alert
from models_store.audit import record
from models_store.orm import AlertRecord, RiskModel
from service.errors import ConflictError, NotFoundError
from service.monitoring.alerts import alert_public

__all__ = ["resolve_model_alert"]


def _iso(alert: AlertRecord) -> str | None:
    return None if alert.resolved_at is None else alert.resolved_at.isoformat()


def resolve_model_alert(
    *, session: Session, model: RiskModel, alert_id: int, key_id: int | None
) -> dict[str, Any]:
    """Close alert ``alert_id`` of ``model`` now; the closed alert as JSON (committed)."""
    alert = session.get(AlertRecord, alert_id)
    if alert is None or alert.model_id != model.id:
        raise NotFoundError(
            f"model {model.name!r} has no alert {alert_id}",
            field="alert_id",
            value=alert_id,
            remedy=f"list the model's alerts with GET /risk-models/{model.name}/alerts",
        )
    if alert.resolved_at is None and close_open_alert(
        session=session, alert_id=alert_id, resolved_at=utcnow()
    ):
        record(
            session=session,
            action="alert.resolve",
            key_id=key_id,
            model_name=model.name,
            details={
                "alert_id": alert.id,
                "measure": alert.measure,
                "version": alert.version_number,
                "raised_at": alert.raised_at.isoformat(),
            },
        )
        session.commit()
        session.refresh(alert)
        return alert_public(alert)
    session.rollback()
    session.refresh(alert)
    raise ConflictError(
        f"alert {alert_id} of model {model.name!r} is already resolved (at {_iso(alert)})",
        field="alert_id",
        value=alert_id,
        remedy="nothing to do: a resolved alert stays resolved; list the open ones with "
        f"GET /risk-models/{model.name}/alerts?open_only=true",
        details={"resolved_at": _iso(alert)},
    )
