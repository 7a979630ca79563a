"""Domain operation: the calibration report of one window of scored outcomes.

    window (since, until, on, version) -> columns (the model's in-memory snapshot, see
    :mod:`.snapshot`, or one columnar query)
    -> service.stats.calibration.calibration_report -> JSON-ready dict

"Not enough outcomes" is an answer, not an error: the body has ``status:
"not_enough_outcomes"``, the counts and the minimum counts, and no measures (HTTP 200). A
window is a valid question whose honest answer is "too few outcomes to say".

Hosmer–Lemeshow degrees of freedom: monitoring data are *external* to the fit (scored after
it), so ``df = groups`` (not ``groups - 2``); the grouping rule is stated in the report.
"""

from __future__ import annotations

from dataclasses import dataclass
from datetime import datetime
from typing import Any, Literal

import numpy as np
from sqlalchemy.orm import Session

from models_store.orm import RiskModel
from models_store.scores import ScoreColumns, scores_with_outcomes
from service.config import Settings
from service.errors import NotEnoughOutcomesError
from service.monitoring._json import jsonable
from service.monitoring.snapshot import OutcomeSnapshots
from service.stats.calibration import calibration_report

__all__ = ["Window", "calibration_view", "fetch_window", "report_measures"]

WindowOn = Literal["score", "outcome"]


@dataclass(frozen=True)
class Window:
    """Which scored outcomes a report covers: ``[since, until)`` on score or outcome time."""

    since: datetime | None = None
    until: datetime | None = None
    on: WindowOn = "score"
    version: int | None = None

    def to_dict(self) -> dict[str, Any]:
        return {"since": self.since, "until": self.until, "on": self.on, "version": self.version}


def fetch_window(
    session: Session, model: RiskModel, window: Window, snapshots: OutcomeSnapshots | None = None
) -> ScoreColumns:
    """The window's scores that have outcomes, as columns: from the model's in-memory
    snapshot when ``snapshots`` is given (brought up to date first), else one query."""
    if snapshots is not None:
        snap = snapshots.get(session, model)
        return snap.columns(
            since=window.since, until=window.until, on=window.on, version=window.version
        )
    return scores_with_outcomes(
        session=session,
        model=model,
        since=window.since,
        until=window.until,
        on=window.on,
        version=window.version,
    )


def counts(y: np.ndarray) -> dict[str, int]:
    events = int(np.count_nonzero(y))
    return {"n": int(y.shape[0]), "events": events, "non_events": int(y.shape[0]) - events}


def report_measures(
    y: np.ndarray, p: np.ndarray, settings: Settings, confidence_level: float
) -> dict[str, Any]:
    """``{"status": "ok", "measures": ...}`` or ``{"status": "not_enough_outcomes", ...}``."""
    try:
        rep = calibration_report(
            y,
            p,
            min_outcomes=settings.monitor_min_outcomes,
            min_events=settings.monitor_min_events,
            development=False,
            confidence_level=confidence_level,
        )
    except NotEnoughOutcomesError as exc:
        return {
            "status": "not_enough_outcomes",
            "message": exc.message,
            "remedy": exc.remedy,
            "required": exc.details.get("required"),
        }
    d = jsonable(rep)
    flexible = d["flexible"]
    measures = {
        "observed_expected": d["observed_expected"],
        "calibration_in_the_large": d["calibration_in_the_large"],
        "calibration_slope": d["calibration_slope"],
        "recalibration_intercept": d["recalibration_intercept"],
        "probability_scores": d["scores"],
        "auc": d["auc"],
        "hosmer_lemeshow": {k: v for k, v in d["hosmer_lemeshow"].items() if k != "groups"},
        "spiegelhalter": d["spiegelhalter"],
        "flexible_calibration": {
            k: v for k, v in flexible.items() if k not in ("curve_predicted", "curve_observed")
        },
    }
    return {
        "status": "ok",
        "confidence_level": confidence_level,
        "measures": measures,
        "reliability": d["reliability"],
        "flexible_curve": {
            "predicted": flexible["curve_predicted"],
            "observed": flexible["curve_observed"],
        },
        "hosmer_lemeshow_groups": d["hosmer_lemeshow"]["groups"],
    }


def calibration_view(
    *,
    session: Session,
    model: RiskModel,
    window: Window,
    settings: Settings,
    confidence_level: float | None = None,
    snapshots: OutcomeSnapshots | None = None,
) -> dict[str, Any]:
    """The JSON-ready calibration report of ``window`` (see module docstring)."""
    cols = fetch_window(session, model, window, snapshots)
    level = confidence_level or settings.default_confidence_level
    body: dict[str, Any] = {
        "model": model.name,
        "window": window.to_dict(),
        "counts": counts(cols.outcome),
        "versions": sorted({int(v) for v in np.unique(cols.version)}),
    }
    if cols.n:
        body["first_score_at"] = _iso(cols.created_at.min())
        body["last_score_at"] = _iso(cols.created_at.max())
    y = cols.outcome.astype(np.float64)
    body.update(report_measures(y, cols.probability, settings, level))
    return body


def _iso(t: np.datetime64) -> str:
    return str(np.datetime_as_string(t, unit="us")) + "Z"
