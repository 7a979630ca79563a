"""Schemas shared by every resource: error bodies, health answers, base config, and
:data:`Instant`, the one type of every date-time a client sends (bodies and queries)."""

from __future__ import annotations

import re
from datetime import UTC, datetime
from typing import Annotated, Any

from pydantic import BaseModel, BeforeValidator, ConfigDict, Field, WithJsonSchema
from pydantic_core import PydanticCustomError

__all__ = [
    "EARLIEST",
    "LATEST",
    "ErrorDetail",
    "ErrorResponse",
    "HealthPublic",
    "Instant",
    "ReadinessPublic",
    "StrictModel",
    "parse_instant",
]

#: The range of instants riskfit accepts from a client, in UTC: [EARLIEST, LATEST). Wide
#: enough for any real date, far enough from year 1 and 9999 that no conversion between
#: zones or window arithmetic (days added to a bound) can leave Python's datetime range.
EARLIEST = datetime(1900, 1, 1, tzinfo=UTC)
LATEST = datetime(9000, 1, 1, tzinfo=UTC)
_ISO = re.compile(
    r"\d{4}-\d{2}-\d{2}[T ]\d{2}:\d{2}(:\d{2}(\.\d{1,9})?)?(Z|[+-]\d{2}:\d{2})", re.ASCII
)
_EXAMPLE = "2025-02-11T08:30:00Z"
INSTANT_RULES = (
    "A string in ISO 8601 / RFC 3339 form with a UTC offset, e.g. `2025-02-11T08:30:00Z` or "
    "`2025-02-11T09:30:00+01:00` (seconds and fractions optional); numbers (Unix times) and "
    "times without an offset are refused; the instant must lie in "
    f"[{EARLIEST:%Y-%m-%d}, {LATEST:%Y-%m-%d}) UTC."
)


def _refuse(code: str, message: str, remedy: str) -> PydanticCustomError:
    return PydanticCustomError(code, message, {"remedy": remedy})


def parse_instant(value: Any) -> datetime:
    """A client's date-time, checked: an ISO 8601 string with an offset, inside
    [:data:`EARLIEST`, :data:`LATEST`) once in UTC. The offset the client gave is kept.

    Raises :class:`pydantic_core.PydanticCustomError` (a 422 naming the field, the value and,
    in ``ctx["remedy"]``, what to send instead). A ``datetime`` built in Python (not from a
    request) passes through the same zone and range checks.
    """
    if isinstance(value, datetime):
        parsed = value
    elif not isinstance(value, str):
        raise _refuse(
            "datetime_type",
            "a date-time must be a string in ISO 8601 form with a UTC offset, not a "
            f"{type(value).__name__}",
            f"send e.g. {_EXAMPLE!r} (numbers such as Unix times are not accepted)",
        )
    else:
        text = value.strip().upper()
        if not _ISO.fullmatch(text):
            plus_lost = (
                len(text) > 6 and text[-6] == " " and _ISO.fullmatch(f"{text[:-6]}+{text[-5:]}")
            )
            raise _refuse(
                "datetime_format",
                "not an ISO 8601 date-time with a UTC offset (YYYY-MM-DDTHH:MM[:SS[.f]]±HH:MM "
                "or Z)",
                "in a URL, write the offset's + as %2B (a bare + reads as a space)"
                if plus_lost
                else f"send e.g. {_EXAMPLE!r}; give the offset (Z for UTC) explicitly",
            )
        try:
            parsed = datetime.fromisoformat(text)
        except ValueError as exc:
            raise _refuse(
                "datetime_format",
                f"not a valid calendar date-time ({exc})",
                f"send an existing date and time, e.g. {_EXAMPLE!r}",
            ) from None
    offset = parsed.utcoffset()
    if offset is None:
        raise _refuse(
            "datetime_zone",
            "the date-time has no UTC offset",
            f"add the offset, e.g. {_EXAMPLE!r} (Z for UTC)",
        )
    # Compare in naive UTC: the aware conversion itself overflows near year 1 and 9999.
    naive_utc = parsed.replace(tzinfo=None)
    if not (
        EARLIEST.replace(tzinfo=None) + offset <= naive_utc < LATEST.replace(tzinfo=None) + offset
    ):
        raise _refuse(
            "datetime_range",
            f"the instant is outside the accepted range [{EARLIEST:%Y-%m-%d}, "
            f"{LATEST:%Y-%m-%d}) UTC",
            f"send a date-time between {EARLIEST:%Y-%m-%d} and {LATEST:%Y-%m-%d}; leave an "
            "optional bound out for an open-ended window",
        )
    return parsed


#: Every date-time a client sends: see :func:`parse_instant` and :data:`INSTANT_RULES`.
Instant = Annotated[
    datetime,
    BeforeValidator(parse_instant),
    WithJsonSchema({"type": "string", "format": "date-time", "description": INSTANT_RULES}),
]


class StrictModel(BaseModel):
    """Request bodies: unknown fields are refused (a typo must not pass silently)."""

    model_config = ConfigDict(extra="forbid", str_strip_whitespace=True)


class ErrorDetail(BaseModel):
    code: str = Field(description="Stable machine-readable error code, e.g. `unseen_level`.")
    message: str = Field(description="What is wrong, for a person.")
    field: str | None = Field(None, description="Dotted path of the offending input.")
    value: Any = Field(None, description="The offending value (shortened).")
    remedy: str | None = Field(None, description="What to do about it.")
    details: dict[str, Any] | None = Field(None, description="Extra machine-readable facts.")


class ErrorResponse(BaseModel):
    """Every 4xx/5xx answer has this body."""

    model_config = ConfigDict(
        json_schema_extra={
            "examples": [
                {
                    "error": {
                        "code": "unseen_level",
                        "message": "material='copper' was not among the levels seen at fit time.",
                        "field": "records[0].material",
                        "value": "copper",
                        "remedy": "Use one of: PVC, asbestos cement, cast iron, ductile iron.",
                    }
                }
            ]
        }
    )
    error: ErrorDetail


class HealthPublic(BaseModel):
    status: str = Field(examples=["ok"])
    version: str
    time: datetime


class ReadinessPublic(BaseModel):
    status: str = Field(examples=["ready"])
    database: str = Field(examples=["ok"])
    time: datetime
