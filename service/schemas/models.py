"""Risk models and their champion: ``ChampionChange`` (request), ``RiskModelPublic``,
``RiskModelList``, ``ChampionPublic``."""

from __future__ import annotations

from datetime import datetime

from pydantic import BaseModel, Field

from service.schemas.common import StrictModel

__all__ = [
    "ChampionChange",
    "ChampionChangePublic",
    "ChampionPublic",
    "RiskModelList",
    "RiskModelPublic",
]


class ChampionChange(StrictModel):
    """Body of ``PUT /risk-models/{model}/champion``: promote (or roll back to) a version."""

    version: int = Field(ge=1, le=2_147_483_647, description="Version number to serve.")
    reason: str = Field(
        min_length=1,
        max_length=1000,
        description="Why the champion changes; kept in the history.",
        examples=["version 2 refitted on year-two outcomes calibrates better"],
    )


class ChampionChangePublic(BaseModel):
    version: int
    previous_version: int | None
    reason: str
    changed_at: datetime
    changed_by_key_id: int | None = None


class ChampionPublic(BaseModel):
    """The serving version and every change that led to it (newest first)."""

    model: str
    version: int
    since: datetime
    reason: str
    history: list[ChampionChangePublic]


class RiskModelPublic(BaseModel):
    name: str = Field(examples=["water-main-breaks"])
    description: str | None = None
    created_at: datetime
    champion_version: int | None = Field(description="Version that scores by default.")
    latest_version: int | None
    n_versions: int


class RiskModelList(BaseModel):
    items: list[RiskModelPublic]
    count: int
