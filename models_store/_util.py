"""Small helpers shared by the repository modules."""

from __future__ import annotations

from collections.abc import Iterator, Sequence
from typing import TypeVar

from sqlalchemy import func, select
from sqlalchemy.orm import InstrumentedAttribute, Session

__all__ = ["CHUNK", "chunks", "next_number"]

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
