"""Scores: ``ScoreCreate`` (request) and ``ScoreBatchPublic`` (response).

Records stay plain dicts of scalars: a batch of 10,000 is columnarised once and
validated as arrays by the scoring operation, not as 10,000 pydantic models.
The record field ``key`` is reserved for the client's own identifier (unique per model).
"""

from __future__ import annotations

from datetime import datetime

from pydantic import BaseModel, ConfigDict, Field

from service.schemas.common import StrictModel

__all__ = ["ScoreBatchPublic", "ScoreCreate", "ScorePublic"]


class ScoreCreate(StrictModel):
    """Body of ``POST /risk-models/{model}/scores``."""

    model_config = ConfigDict(
        json_schema_extra={
            "examples": [
                {
                    "records": [
                        {
                            "key": "segment-0042",
                            "age_years": 85,
                            "diameter_mm": 150,
                            "material": "cast iron",
                            "soil": "high",
                            "prior_breaks_5y": 2,
                        },
                        {
                            "age_years": 12,
                            "diameter_mm": 200,
                            "material": "PVC",
                            "soil": "low",
                            "prior_breaks_5y": 0,
                        },
                    ],
                    "confidence_level": 0.95,
                    "explain": True,
                }
            ]
        },
    )

    records: list[dict[str, float | int | str | None]] = Field(
        min_length=1, description="Records to score; `key` (optional) is the client's id."
    )
    version: int | None = Field(None, ge=1, description="Version to use (default: champion).")
    confidence_level: float | None = Field(None, gt=0.0, lt=1.0)
    explain: bool = Field(False, description="Add per-term contributions to the logit.")


class ScorePublic(BaseModel):
    score_id: str
    key: str | None
    probability: float
    ci_lower: float
    ci_upper: float
    eta: float = Field(description="Linear predictor (log-odds).")
    se_eta: float = Field(description="Standard error of eta from the coefficient covariance.")
    warnings: list[str]
    contributions: dict[str, float] | None = None


class ScoreBatchPublic(BaseModel):
    model: str
    version: int
    confidence_level: float
    ci_method: str = Field(description="`wald-logit`: eta +/- z se(eta), mapped by expit.")
    n_records: int
    created_at: datetime
    scores: list[ScorePublic]
