"""Column types shared by the ORM: timezone-aware UTC timestamps and strict JSON."""

from __future__ import annotations

import json
from datetime import UTC, datetime
from typing import Any

from sqlalchemy import DateTime
from sqlalchemy.engine import Dialect
from sqlalchemy.types import TypeDecorator

__all__ = ["UTCDateTime", "dumps_json", "utcnow"]


def utcnow() -> datetime:
    """The current time as an aware UTC datetime (the only clock the store uses)."""
    return datetime.now(UTC)


def dumps_json(value: Any) -> str:
    """Serialise a JSON column value; NaN/inf are refused on every backend alike.

    PostgreSQL's ``json`` type rejects ``NaN`` while SQLite would store it silently, so the
    store refuses it everywhere: callers encode non-finite statistics explicitly (e.g. None).
    """
    return json.dumps(value, allow_nan=False, separators=(",", ":"))


class UTCDateTime(TypeDecorator[datetime]):
    """A timestamp stored in UTC and always returned timezone-aware (UTC).

    PostgreSQL keeps ``timestamptz``; SQLite has no time-zone type, so the value is stored as
    naive UTC text and marked UTC again on the way out. Naive datetimes are refused on the way in:
    guessing their zone is how audit trails go wrong.
    """

    impl = DateTime(timezone=True)
    cache_ok = True

    def process_bind_param(self, value: datetime | None, dialect: Dialect) -> datetime | None:
        if value is None:
            return None
        if not isinstance(value, datetime):
            raise TypeError(f"expected a datetime, got {type(value).__name__}: {value!r}")
        if value.tzinfo is None or value.utcoffset() is None:
            raise ValueError(
                f"naive datetime {value.isoformat()} refused: the store keeps aware UTC times; "
                "attach a time zone (e.g. datetime.now(UTC))"
            )
        value = value.astimezone(UTC)
        return value.replace(tzinfo=None) if dialect.name == "sqlite" else value

    def process_result_value(self, value: datetime | None, dialect: Dialect) -> datetime | None:
        if value is None:
            return None
        if value.tzinfo is None:
            return value.replace(tzinfo=UTC)
        return value.astimezone(UTC)
