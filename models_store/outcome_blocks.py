"""Packed outcome-column blocks of a model (see :class:`models_store.orm.OutcomeColumnBlock`)."""

from __future__ import annotations

from datetime import datetime

from sqlalchemy import delete, func, select
from sqlalchemy.orm import Session, defer

from models_store._types import utcnow
from models_store.orm import Outcome, OutcomeColumnBlock, RiskModel

__all__ = [
    "add_outcome_block",
    "count_outcomes_between",
    "delete_outcome_blocks",
    "latest_id_received_before",
    "list_outcome_blocks",
]


def list_outcome_blocks(
    *, session: Session, model: RiskModel, with_data: bool = True
) -> list[OutcomeColumnBlock]:
    """The model's blocks in id order (``after_id`` ascending); ``data`` left unread when
    ``with_data`` is False."""
    stmt = select(OutcomeColumnBlock).where(OutcomeColumnBlock.model_id == model.id)
    if not with_data:
        stmt = stmt.options(defer(OutcomeColumnBlock.data))
    return list(session.scalars(stmt.order_by(OutcomeColumnBlock.after_id)))


def add_outcome_block(
    *,
    session: Session,
    model: RiskModel,
    after_id: int,
    last_id: int,
    n_rows: int,
    latest_received_at: datetime,
    layout: str,
    data: bytes,
) -> OutcomeColumnBlock:
    """Add one block (no commit here)."""
    block = OutcomeColumnBlock(
        model_id=model.id,
        after_id=after_id,
        last_id=last_id,
        n_rows=n_rows,
        latest_received_at=latest_received_at,
        layout=layout,
        data=data,
        created_at=utcnow(),
    )
    session.add(block)
    session.flush()
    return block


def delete_outcome_blocks(*, session: Session, model: RiskModel) -> None:
    """Drop every block of the model (no commit here)."""
    session.execute(delete(OutcomeColumnBlock).where(OutcomeColumnBlock.model_id == model.id))


def count_outcomes_between(
    *, session: Session, model: RiskModel, after_id: int, last_id: int
) -> int:
    """The model's outcome rows with ``after_id < id <= last_id``."""
    stmt = select(func.count()).where(
        Outcome.model_id == model.id, Outcome.id > after_id, Outcome.id <= last_id
    )
    return int(session.scalar(stmt) or 0)


def latest_id_received_before(*, session: Session, model: RiskModel, before: datetime) -> int:
    """The largest outcome id of the model received before ``before`` (0 if none)."""
    stmt = select(func.max(Outcome.id)).where(
        Outcome.model_id == model.id, Outcome.received_at < before
    )
    return int(session.scalar(stmt) or 0)
