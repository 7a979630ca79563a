"""API keys and audit events: ``KeyCreate`` (request), ``KeyPublic``, ``KeyCreated`` (the one
answer that carries the secret), ``KeyList``, ``AuditEventPublic``, ``AuditEventList``."""

from __future__ import annotations

from datetime import datetime
from typing import Any, Literal

from pydantic import BaseModel, Field

from service.schemas.common import StrictModel

__all__ = [
    "AuditEventList",
    "AuditEventPublic",
    "KeyCreate",
    "KeyCreated",
    "KeyList",
    "KeyPublic",
]


class KeyCreate(StrictModel):
    """Body of ``POST /api-keys``."""

    role: Literal["scorer", "modeler", "admin"] = Field(
        description="`scorer`: scores, outcomes, reads; `modeler`: also fits, champion "
        "changes, refits; `admin`: also key management and the audit log."
    )
    name: str = Field(
        min_length=1,
        max_length=200,
        pattern=r"^[^\x00-\x1f]+$",
        description="Who or what holds the key, e.g. `billing-batch`.",
    )


class KeyPublic(BaseModel):
    id: int
    name: str
    role: str
    prefix: str = Field(description="First characters of the key, to tell keys apart.")
    created_at: datetime
    last_used_at: datetime | None = Field(description="Refreshed at most once a minute.")
    revoked_at: datetime | None


class KeyCreated(KeyPublic):
    key: str = Field(description="The key itself. Shown only in this answer; store it now.")


class KeyList(BaseModel):
    items: list[KeyPublic]
    count: int


class AuditEventPublic(BaseModel):
    id: int
    at: datetime
    key_id: int | None = Field(description="Acting key; null for the command line or no-auth.")
    action: str = Field(
        description="`version.create`, `champion.change`, `refit.start`, `refit.finish`, "
        "`key.create` or `key.revoke`."
    )
    model: str | None
    details: dict[str, Any]


class AuditEventList(BaseModel):
    items: list[AuditEventPublic]
    count: int
