"""Outcomes: ``OutcomeCreate`` (request) and ``OutcomeBatchPublic`` (response)."""

from __future__ import annotations

from typing import Annotated, Any

from pydantic import BaseModel, ConfigDict, Field, model_validator

from service.schemas.common import ErrorDetail, Instant, StrictModel

__all__ = [
    "OutcomeBatchPublic",
    "OutcomeCounts",
    "OutcomeCreate",
    "OutcomeIn",
    "OutcomeItemPublic",
    "OutcomeRefusedPublic",
]


class OutcomeIn(StrictModel):
    """One observed outcome, naming its score by ``score_id`` or by the record's ``key`` (at
    least one of them; both must then name the same score)."""

    model_config = ConfigDict(
        json_schema_extra={
            "anyOf": [
                {"required": ["score_id"], "properties": {"score_id": {"type": "string"}}},
                {"required": ["key"], "properties": {"key": {"type": "string"}}},
            ]
        }
    )

    score_id: str | None = Field(
        None, min_length=1, max_length=36, description="`score_id` from POST .../scores."
    )
    key: str | None = Field(
        None, min_length=1, max_length=200, description="The client's record key."
    )
    outcome: Annotated[int, Field(strict=True, ge=0, le=1)] = Field(
        description="1 if the event happened, 0 if it did not (integers only)."
    )
    observed_at: Instant | None = Field(
        None,
        description="When the outcome was observed (ISO 8601 with a UTC offset; default: "
        "when it is received). Not in the future (beyond the clock-skew allowance, setting "
        "`RISKFIT_CLOCK_SKEW_SECONDS`) and not before the score it resolves was made.",
    )

    @model_validator(mode="after")
    def _names_a_score(self) -> OutcomeIn:
        if self.score_id is None and self.key is None:
            raise ValueError("give score_id or key to name the score this outcome belongs to")
        return self


class OutcomeCreate(StrictModel):
    """Body of ``POST /risk-models/{model}/outcomes``."""

    model_config = ConfigDict(
        json_schema_extra={
            "examples": [
                {
                    "outcomes": [
                        {"key": "segment-0042", "outcome": 1, "observed_at": "2025-02-11T00:00Z"},
                        {"score_id": "3f1c2a4e-1d1b-4e53-9a70-5c3b8f0e2d11", "outcome": 0},
                    ]
                }
            ]
        }
    )

    # The most items is the setting max_records_per_request, enforced by service.limits before
    # the body is parsed; the OpenAPI document carries it as maxItems (service.api.openapi_doc).
    outcomes: list[OutcomeIn] = Field(min_length=1)


class OutcomeItemPublic(BaseModel):
    index: int = Field(description="Position of the item in the request.")
    score_id: str | None
    key: str | None
    outcome: int
    stored_outcome: int | None = Field(
        None, description="The outcome already stored (duplicates and conflicts)."
    )
    reason: str | None = None


class OutcomeCounts(BaseModel):
    accepted: int
    duplicates: int
    conflicts: int
    unknown: int


class OutcomeBatchPublic(BaseModel):
    """Every item of the request is in exactly one of the four lists."""

    model: str
    n_items: int
    counts: OutcomeCounts
    accepted: list[OutcomeItemPublic]
    duplicates: list[OutcomeItemPublic]
    conflicts: list[OutcomeItemPublic]
    unknown: list[OutcomeItemPublic]
    error: dict[str, Any] | None = Field(
        None, description="Present with status 409 or 404: the shared error object."
    )


class OutcomeRefusedPublic(OutcomeBatchPublic):
    """A batch of which no item stood (404 all unknown, 409 conflicts): the lists and ``error``."""

    error: ErrorDetail  # type: ignore[assignment]
