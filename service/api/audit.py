"""``GET /audit-events`` (admin only): who (key id) did what, to which model, and when."""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Query

from models_store.audit import list_events
from service.api.deps import AdminAccess, SessionDep
from service.schemas.common import Instant
from service.schemas.keys import AuditEventList

router = APIRouter(prefix="/audit-events", tags=["access"])


@router.get("", response_model=AuditEventList, summary="Audit events, newest first")
def get_audit_events(
    session: SessionDep,
    _: AdminAccess,
    since: Annotated[
        Instant | None, Query(description="Events at or after (ISO 8601 with a UTC offset).")
    ] = None,
    until: Annotated[
        Instant | None, Query(description="Events before (ISO 8601 with a UTC offset).")
    ] = None,
    action: str | None = Query(None, max_length=64, description="e.g. `champion.change`."),
    model: str | None = Query(None, max_length=200, description="Model name."),
    key_id: int | None = Query(None, ge=1, le=2_147_483_647, description="Acting key id."),
    limit: int = Query(100, ge=1, le=1000),
    offset: int = Query(0, ge=0, le=2_147_483_647),
) -> dict[str, Any]:
    events = list_events(
        session=session,
        since=since,
        until=until,
        action=action,
        model_name=model,
        key_id=key_id,
        limit=limit,
        offset=offset,
    )
    items = [
        {
            "id": e.id,
            "at": e.at,
            "key_id": e.key_id,
            "action": e.action,
            "model": e.model_name,
            "details": e.details,
        }
        for e in events
    ]
    return {"items": items, "count": len(items)}
