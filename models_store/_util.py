"""Small helpers shared by the repository modules."""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from datetime import datetime
from typing import Any, TypeVar

from sqlalchemy import ColumnElement, Select, and_, func, select
from sqlalchemy.orm import InstrumentedAttribute, Session

__all__ = ["CHUNK", "chunks", "next_number", "window"]

T = TypeVar("T")

# Rows/parameters per statement: below SQLite's 32766 bound parameters and PostgreSQL's 65535.
CHUNK = 5000


def chunks(items: Sequence[T], size: int = CHUNK) -> Iterator[Sequence[T]]:
    """Consecutive slices of ``items`` of at most ``size`` elements."""
    for start in range(0, len(items), size):
        yield items[start : start + size]


def next_number(
    session: Session,
    column: InstrumentedAttribute[int],
    owner: InstrumentedAttribute[int],
    owner_id: int,
) -> int:
    """``max(column) + 1`` among rows whose ``owner`` is ``owner_id`` (1 for the first row).

    Two writers may compute the same number on PostgreSQL; the unique constraint on
    ``(owner, column)`` then refuses the second, which the caller reports as a conflict.
    """
    current = session.scalar(select(func.max(column)).where(owner == owner_id))
    return int(current or 0) + 1


def window(
    stmt: Select[Any],
    *,
    time_col: InstrumentedAttribute[datetime],
    model_col: InstrumentedAttribute[int],
    version_col: InstrumentedAttribute[int],
    model_id: int,
    since: datetime | None,
    until: datetime | None,
    version: int | None,
) -> Select[Any]:
    """``stmt`` restricted to one model, the half-open time window ``[since, until)`` and
    optionally one version."""
    for name, bound in (("since", since), ("until", until)):
        if bound is not None and bound.tzinfo is None:
            raise ValueError(f"{name}={bound.isoformat()} is naive; pass an aware UTC datetime")
    conditions: list[ColumnElement[bool]] = [model_col == model_id]
    if since is not None:
        conditions.append(time_col >= since)
    if until is not None:
        conditions.append(time_col < until)
    if version is not None:
        conditions.append(version_col == version)
    return stmt.where(and_(*conditions))
