"""API keys (admin only): ``POST /api-keys`` (the key is in this answer only), ``GET /api-keys``,
``DELETE /api-keys/{key_id}`` (revokes; the row stays for the audit trail)."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Path, status

from models_store.keys import list_keys
from models_store.orm import ApiKey
from service.api.deps import AdminAccess, SessionDep, SettingsDep
from service.schemas import ErrorResponse
from service.schemas.keys import KeyCreate, KeyCreated, KeyList, KeyPublic
from service.security import issue_key, revoke

router = APIRouter(prefix="/api-keys", tags=["access"])


def key_public(row: ApiKey) -> dict[str, Any]:
    return {
        "id": row.id,
        "name": row.name,
        "role": row.role,
        "prefix": row.prefix,
        "created_at": row.created_at,
        "last_used_at": row.last_used_at,
        "revoked_at": row.revoked_at,
    }


@router.post(
    "",
    status_code=status.HTTP_201_CREATED,
    response_model=KeyCreated,
    summary="Create an API key (shown once)",
)
def post_key(
    body: KeyCreate, session: SessionDep, settings: SettingsDep, who: AdminAccess
) -> dict[str, Any]:
    issued = issue_key(
        session=session, settings=settings, role=body.role, name=body.name, by_key_id=who.key_id
    )
    session.commit()
    row = session.get(ApiKey, issued.id)
    assert row is not None
    return {**key_public(row), "key": issued.key}


@router.get("", response_model=KeyList, summary="API keys (never the keys themselves)")
def get_keys(session: SessionDep, _: AdminAccess) -> dict[str, Any]:
    items = [key_public(k) for k in list_keys(session=session)]
    return {"items": items, "count": len(items)}


@router.delete(
    "/{key_id}",
    response_model=KeyPublic,
    summary="Revoke an API key",
    responses={409: {"model": ErrorResponse, "description": "A key cannot revoke itself."}},
)
def delete_key(
    session: SessionDep,
    who: AdminAccess,
    key_id: int = Path(ge=1, le=2_147_483_647, description="Key id (see GET /api-keys)."),
) -> dict[str, Any]:
    row = revoke(session=session, key_id=key_id, by_key_id=who.key_id)
    session.commit()
    return key_public(row)
