"""Scores: ``ScoreCreate`` (request) and ``ScoreBatchPublic`` (response).

The data come as ``records`` (one dict per record) or ``columns`` (one list per feature, the
faster layout for big batches), exactly one of the two. The route parses the body with orjson
and validates only :class:`ScoreOptions` with pydantic; the data are validated as arrays by
the scoring operation, not as 10,000 pydantic models. :class:`ScoreCreate` is the documented
body (OpenAPI) and the same checks. The record field (or column) ``key`` is reserved for the
client's own identifier (unique per model), and ``passthrough`` for an object of the client's
own values echoed with the score; any other field that is not one of the version's inputs is
refused (422), see :mod:`service.score_input`.
"""

from __future__ import annotations

from datetime import datetime
from typing import Self

from pydantic import BaseModel, ConfigDict, Field, model_validator

from service.schemas.common import StrictModel

__all__ = ["ScoreBatchPublic", "ScoreCreate", "ScoreOptions", "ScorePublic"]

Scalar = bool | float | int | str | None  # as CellValue in service.schemas.versions
Passthrough = dict[str, Scalar]
_PASSTHROUGH = (
    "`passthrough` (optional) is an object of the caller's own values (text, finite numbers, "
    "booleans, null; not nested), not used for scoring, echoed in the record's score (text "
    "in Unicode NFC) and not stored in the score log. Any other field that is not one of the "
    "version's features or its offset column is refused (422)."
)


class ScoreOptions(StrictModel):
    """The body of ``POST /risk-models/{model}/scores`` without its data."""

    version: int | None = Field(None, ge=1, description="Version to use (default: champion).")
    confidence_level: float | None = Field(None, gt=0.0, lt=1.0)
    explain: bool = Field(False, description="Add per-term contributions to the logit.")


class ScoreCreate(ScoreOptions):
    """Body of ``POST /risk-models/{model}/scores``: ``records`` or ``columns``, not both."""

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

    records: list[dict[str, Scalar | Passthrough]] | None = Field(
        None,
        min_length=1,
        description="Records to score: the version's features (and offset column); `key` "
        "(optional) is the client's id. " + _PASSTHROUGH,
    )
    columns: dict[str, list[Scalar | Passthrough]] | None = Field(
        None,
        description="The same data by column: one list per feature (and optional `key`, and "
        "optional `passthrough`: one object or null per record), all of one length. Faster "
        "than `records` for big batches.",
    )

    @model_validator(mode="after")
    def _one_layout(self) -> Self:
        if (self.records is None) == (self.columns is None):
            raise ValueError("give exactly one of records or columns")
        return self


class ScorePublic(BaseModel):
    """One record's score. Every number is finite (never null): a record whose linear
    predictor or its standard error would overflow is refused (422), as is a value beyond the
    extrapolation guard (``RISKFIT_EXTRAPOLATION_LIMIT`` training ranges outside the training
    range). Probabilities are doubles: for |eta| above about 37 they round to 0 or 1."""

    score_id: str
    key: str | None
    probability: float = Field(description="expit(eta), in [0, 1].")
    ci_lower: float = Field(description="expit(eta - z se_eta), in [0, 1].")
    ci_upper: float = Field(description="expit(eta + z se_eta), in [0, 1].")
    eta: float = Field(description="Linear predictor (log-odds), finite.")
    se_eta: float = Field(
        description="Standard error of eta from the coefficient covariance, finite and >= 0."
    )
    warnings: list[str] = Field(
        description="E.g. extrapolation: a value outside its feature's training range."
    )
    passthrough: Passthrough | None = Field(
        None,
        description="The record's `passthrough` object as sent (text in NFC; null when that "
        "record sent none); the field is present only when some record of the request sent one.",
    )
    contributions: dict[str, float] | None = None


class ScoreBatchPublic(BaseModel):
    model: str
    version: int
    confidence_level: float
    ci_method: str = Field(description="`wald-logit`: eta +/- z se(eta), mapped by expit.")
    n_records: int
    created_at: datetime
    scores: list[ScorePublic]
