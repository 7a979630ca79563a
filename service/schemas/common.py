"""Schemas shared by every resource: error bodies, health answers, base config."""

from __future__ import annotations

from datetime import datetime
from typing import Any

from pydantic import BaseModel, ConfigDict, Field

__all__ = [
    "ErrorDetail",
    "ErrorResponse",
    "HealthPublic",
    "ReadinessPublic",
    "StrictModel",
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
