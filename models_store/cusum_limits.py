"""Stored CUSUM control limits: found by (model, key digest), written once, never updated."""

from __future__ import annotations

from typing import Any

from sqlalchemy import select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from models_store._types import utcnow
from models_store.orm import CusumLimitRecord, RiskModel

__all__ = ["add_cusum_limit", "find_cusum_limit"]


def find_cusum_limit(
    *, session: Session, model: RiskModel, key_digest: str
) -> CusumLimitRecord | None:
    """The stored limit of ``model`` under ``key_digest``, or None."""
    stmt = select(CusumLimitRecord).where(
        CusumLimitRecord.model_id == model.id, CusumLimitRecord.key_digest == key_digest
    )
    return session.scalar(stmt)


def add_cusum_limit(
    *,
    session: Session,
    model: RiskModel,
    key_digest: str,
    depends_on: dict[str, Any],
    h: float,
    control_limit: dict[str, Any],
) -> CusumLimitRecord | None:
    """Add a limit in a savepoint; None when a concurrent writer stored the same key first
    (the unique (model, key digest) constraint: the first one stands). No commit here."""
    row = CusumLimitRecord(
        model_id=model.id,
        key_digest=key_digest,
        depends_on=depends_on,
        h=float(h),
        control_limit=control_limit,
        created_at=utcnow(),
    )
    try:
        with session.begin_nested():
            session.add(row)
    except IntegrityError:
        return None
    return row
