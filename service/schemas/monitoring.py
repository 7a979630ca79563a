"""Monitoring responses: calibration report, drift view, alerts.

Measures stay plain JSON objects produced from the statistics dataclasses (each carries its
``method`` / ``ci_method``, ``confidence_level`` and counts); the envelopes are typed here.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any, Literal

from pydantic import BaseModel, Field

from service.schemas.common import StrictModel

__all__ = [
    "AlertList",
    "AlertPublic",
    "CalibrationReportPublic",
    "DriftPublic",
    "ReportCounts",
    "WindowPublic",
]


class WindowPublic(BaseModel):
    since: datetime | None
    until: datetime | None
    on: Literal["score", "outcome"]
    version: int | None


class ReportCounts(BaseModel):
    n: int = Field(description="Scored records with an outcome in the window.")
    events: int
    non_events: int


class CalibrationReportPublic(BaseModel):
    """``status`` is ``ok`` (measures present) or ``not_enough_outcomes`` (counts only)."""

    model: str
    window: WindowPublic
    counts: ReportCounts
    versions: list[int]
    status: Literal["ok", "not_enough_outcomes"]
    first_score_at: datetime | None = None
    last_score_at: datetime | None = None
    confidence_level: float | None = None
    measures: dict[str, dict[str, Any]] | None = Field(
        None,
        description="observed_expected, calibration_in_the_large, calibration_slope, "
        "recalibration_intercept, probability_scores (Brier, scaled Brier, log loss), auc "
        "(DeLong), hosmer_lemeshow, spiegelhalter, flexible_calibration (ICI, E50, E90, Emax).",
    )
    reliability: dict[str, Any] | None = None
    flexible_curve: dict[str, list[float | None]] | None = None
    hosmer_lemeshow_groups: list[dict[str, Any]] | None = None
    message: str | None = None
    remedy: str | None = None
    required: dict[str, int] | None = None


class AlertPublic(BaseModel):
    id: int
    measure: str
    value: float
    threshold: float
    direction: str
    version: int | None
    window: dict[str, Any]
    raised_at: datetime
    resolved_at: datetime | None
    open: bool
    details: dict[str, Any]


class AlertList(BaseModel):
    model: str
    count: int
    open: int
    items: list[AlertPublic]
    thresholds: dict[str, Any]


class DriftPublic(BaseModel):
    model: str
    window: WindowPublic
    counts: ReportCounts
    confidence_level: float
    windows: dict[str, Any] = Field(description="Key measures per consecutive window.")
    cusum: dict[str, Any] = Field(description="Two-sided risk-adjusted Bernoulli CUSUM.")
    input_drift: dict[str, Any] = Field(description="PSI per feature against the reference.")
    alerts: dict[str, Any] = Field(description="Conditions found and alerts stored now.")


class AlertThresholdsUpdate(StrictModel):
    """Per-model alert thresholds; a name left out uses the service default (settings).

    Once merged with the defaults, ``slope_low < slope_high`` and ``oe_low < oe_high`` (else
    422 naming the field sent)."""

    citl_tolerance: float | None = Field(
        None,
        gt=0.0,
        le=10.0,
        description="Calibration-in-the-large CI beyond ±this.",
    )
    slope_low: float | None = Field(None, gt=0.0, lt=10.0, description="Slope CI below this.")
    slope_high: float | None = Field(None, gt=0.0, le=10.0, description="Slope CI above this.")
    oe_low: float | None = Field(None, gt=0.0, lt=100.0, description="O/E CI below this.")
    oe_high: float | None = Field(None, gt=0.0, le=100.0, description="O/E CI above this.")
    psi: float | None = Field(None, gt=0.0, le=100.0, description="A feature's PSI reaching this.")


class AlertThresholdsPublic(BaseModel):
    """The thresholds a model's alerts use: effective = defaults with the overrides applied."""

    model: str
    effective: dict[str, float]
    overrides: dict[str, float]
    defaults: dict[str, float]
