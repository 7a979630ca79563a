"""Refits: ``RefitCreate`` (request), ``RefitPublic`` (decision) and ``RefitList``.

Gate defaults are :class:`service.stats.updating.GateConfig`'s (riskfit's documented
choices): confidence level 0.95; the challenger's log loss must be *significantly* lower
(upper bound of the paired interval of the difference below ``log_loss_margin`` = 0); Brier
difference at most ``brier_margin`` = 0; the challenger's calibration slope on the holdout
inside ``slope_bounds`` = [0.8, 1.2]; AUC no more than ``auc_margin`` = 0.02 below the
champion's; each part of the window (development, holdout) needs ``min_outcomes`` = 100
outcomes with ``min_events`` = 10 events and as many non-events.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any, Literal

from pydantic import (
    BaseModel,
    ConfigDict,
    Field,
    ValidationInfo,
    field_validator,
    model_validator,
)
from pydantic_core import PydanticCustomError

from service.schemas.common import Instant, StrictModel

__all__ = ["GateOverrides", "RefitCreate", "RefitList", "RefitPublic", "RefitSummary"]

RefitMethod = Literal["auto", "intercept", "recalibrate", "refit"]
Promote = Literal["never", "if-better", "always"]


class GateOverrides(StrictModel):
    """Gate settings to change; anything left out keeps its default (module docstring)."""

    confidence_level: float | None = Field(None, gt=0.0, lt=1.0, description="Default 0.95.")
    log_loss_margin: float | None = Field(None, ge=-1.0, le=1.0, description="Default 0.")
    require_significant_log_loss: bool | None = Field(
        None, description="Default true: the interval's upper bound must be below the margin."
    )
    brier_margin: float | None = Field(None, ge=-1.0, le=1.0, description="Default 0.")
    slope_bounds: tuple[float, float] | None = Field(
        None,
        description="Default [0.8, 1.2]: [low, high] for the challenger's slope, low < high.",
    )
    auc_margin: float | None = Field(None, ge=0.0, le=1.0, description="Default 0.02.")
    min_outcomes: int | None = Field(None, ge=2, le=10_000_000, description="Default 100.")
    min_events: int | None = Field(None, ge=1, le=10_000_000, description="Default 10.")

    @model_validator(mode="after")
    def _bounds_ordered(self) -> GateOverrides:
        if self.slope_bounds is not None and not self.slope_bounds[0] < self.slope_bounds[1]:
            raise ValueError("slope_bounds must be [low, high] with low < high, e.g. [0.8, 1.2]")
        return self


class RefitCreate(StrictModel):
    """Body of ``POST /risk-models/{model}/refits``."""

    model_config = ConfigDict(
        json_schema_extra={
            "examples": [
                {"method": "auto", "promote": "if-better"},
                {"method": "recalibrate", "since": "2025-01-01T00:00:00Z", "dry_run": True},
            ]
        }
    )

    method: RefitMethod = Field(
        "auto",
        description="`auto`: closed testing picks the smallest sufficient update; or force "
        "`intercept`, `recalibrate` or `refit`.",
    )
    since: Instant | None = Field(
        None, description="Scores made at or after (ISO 8601 with a UTC offset)."
    )
    until: Instant | None = Field(
        None,
        description="Scores made before (ISO 8601 with a UTC offset); later than `since` "
        "when both are given.",
    )
    last_n: int | None = Field(
        None, ge=2, le=100_000_000, description="Only the newest N scored records with outcomes."
    )
    pool_training_data: bool = Field(
        False, description="Pool with the champion's training rows (not kept by the store)."
    )
    holdout_fraction: float = Field(
        0.3, ge=0.05, le=0.8, description="Most recent share of the window kept for the gates."
    )
    alpha: float = Field(0.05, gt=0.0, le=0.5, description="Level of the closed test's LR tests.")
    gates: GateOverrides = Field(default_factory=GateOverrides)
    promote: Promote = Field(
        "if-better",
        description="`if-better`: promote a challenger that passes every gate; `never`; "
        "`always` (store and promote whatever the gates say).",
    )
    dry_run: bool = Field(False, description="Decide and answer; write nothing.")
    note: str | None = Field(None, max_length=2000, description="Kept with the new version.")

    @field_validator("until")
    @classmethod
    def _window_ordered(cls, until: datetime | None, info: ValidationInfo) -> datetime | None:
        since = info.data.get("since")
        if since is not None and until is not None and since >= until:
            raise PydanticCustomError(
                "window_order",
                "the window is empty: until must be later than since",
                {"remedy": "give an until later than since, or leave one of them out"},
            )
        return until


class RefitSummary(BaseModel):
    refit_id: int
    status: str = Field(description="`running`, `succeeded` or `failed`.")
    started_at: datetime
    finished_at: datetime | None
    decision: str | None
    challenger_version: int | None
    error: dict[str, Any] | None = None


class RefitList(BaseModel):
    model: str
    items: list[RefitSummary]
    count: int


class RefitPublic(BaseModel):
    """A refit's decision, with the data, the closed test and the gates behind it."""

    model_config = ConfigDict(extra="allow")

    model: str
    refit_id: int | None = Field(description="The stored run (null for a dry run).")
    dry_run: bool
    replayed: bool = Field(description="True when an identical earlier refit is returned.")
    method_requested: str
    method_chosen: str = Field(description="`unchanged`, `intercept`, `recalibrate` or `refit`.")
    decision: str = Field(
        description="`keep` (champion unchanged, nothing new), `promote` (challenger stored "
        "and now champion) or `hold` (challenger stored, champion stays)."
    )
    promoted: bool
    version_written: bool
    challenger_version: int | None
    champion_before: int
    champion_after: int
    reasons: list[str]
    data: dict[str, Any]
    closed_test: dict[str, Any]
    challenger: dict[str, Any] | None
    gates: dict[str, Any] | None
    request_fingerprint: str
    decided_at: datetime
