"""Domain operation: the drift view - measures over time, CUSUM, input drift, alerts.

    window -> columns (in-memory snapshot or one query) -> consecutive windows (:mod:`.windows`)
           -> CUSUM segment of the serving version (:mod:`.cusum_monitor`; the same columns
              are reused when the window is the whole history, else one more read)
           -> PSI per feature from the start of the latest window (:mod:`.input_drift`)
           -> alert conditions, new ones stored once (:mod:`.alerts`), committed

``GET .../drift`` is idempotent but records alerts: the first evaluation that sees a
condition stores it; later evaluations of the same data store nothing new.
"""

from __future__ import annotations

from datetime import datetime, timedelta
from typing import Any

import numpy as np
from sqlalchemy.orm import Session

from models_store.orm import AlertRecord, RiskModel
from models_store.scores import ScoreColumns
from service.config import Settings
from service.monitoring.alerts import alert_public, conditions, store_new_alerts
from service.monitoring.cusum_limits import LimitCache
from service.monitoring.cusum_monitor import cusum_segment, cusum_view
from service.monitoring.input_drift import input_drift
from service.monitoring.report import Window, counts, fetch_window
from service.monitoring.snapshot import OutcomeSnapshots
from service.monitoring.thresholds import for_model
from service.monitoring.windows import WindowBy, drift_windows

__all__ = ["drift_view"]

#: Score times read back as epoch seconds carry about a millisecond of rounding (SQLite).
SCORE_TIME_RESOLUTION = timedelta(milliseconds=2)


def _segment_columns(
    session: Session,
    model: RiskModel,
    cols: ScoreColumns,
    window: Window,
    version: int | None,
    reset_at: datetime | None,
    snapshots: OutcomeSnapshots | None,
) -> ScoreColumns:
    """The CUSUM segment's records: a slice of ``cols`` if it covers them, else a read."""
    whole = window.since is None and window.until is None and window.on == "score"
    if not whole or version is None:
        segment = Window(since=reset_at, on="score", version=version or -1)
        return fetch_window(session, model, segment, snapshots)
    keep = cols.version == version
    if reset_at is not None:
        t0 = np.datetime64(reset_at.replace(tzinfo=None), "us")
        keep &= cols.created_at >= t0
    return ScoreColumns(*(getattr(cols, f)[keep] for f in ScoreColumns.__dataclass_fields__))


def drift_view(
    *,
    session: Session,
    model: RiskModel,
    window: Window,
    by: WindowBy,
    size: int | None,
    settings: Settings,
    cache: LimitCache,
    confidence_level: float | None = None,
    snapshots: OutcomeSnapshots | None = None,
) -> tuple[dict[str, Any], list[AlertRecord]]:
    """The JSON-ready drift view and the alerts this evaluation stored (committed)."""
    level = confidence_level or settings.default_confidence_level
    size = size or (settings.drift_window_records if by == "count" else settings.drift_window_days)
    cols = fetch_window(session, model, window, snapshots)
    t = cols.created_at if window.on == "score" else cols.observed_at
    order = np.argsort(t, kind="stable") if window.on == "outcome" else slice(None)
    y = cols.outcome.astype(np.float64)[order]
    windows = drift_windows(
        t[order],
        y,
        cols.probability[order],
        by=by,
        size=size,
        max_windows=settings.drift_max_windows,
        min_outcomes=settings.monitor_min_outcomes,
        min_events=settings.monitor_min_events,
        confidence_level=level,
    )
    version, reset_at, reason = cusum_segment(session, model, window.version)
    segment = _segment_columns(session, model, cols, window, version, reset_at, snapshots)
    latest_start = windows["items"][-1]["start"] if windows["items"] else None
    psi_since = None if latest_start is None else datetime.fromisoformat(latest_start)
    if psi_since is not None and by == "count":
        psi_since -= SCORE_TIME_RESOLUTION  # the window's first record, despite rounding
    body: dict[str, Any] = {
        "model": model.name,
        "window": window.to_dict(),
        "counts": counts(cols.outcome),
        "confidence_level": level,
        "windows": windows,
        "cusum": cusum_view(
            session=session,
            model=model,
            cols=segment,
            version=version,
            reset_at=reset_at,
            reason=reason,
            settings=settings,
            cache=cache,
        ),
        "input_drift": input_drift(
            session=session,
            model=model,
            version=version,
            since=psi_since,
            max_records=settings.psi_max_records,
        ),
    }
    found = conditions(body, for_model(settings, model))
    new = store_new_alerts(session=session, model=model, found=found)
    session.commit()
    body["alerts"] = {
        "conditions": [
            {k: c[k] for k in ("measure", "value", "threshold", "direction", "version", "window")}
            for c in found
        ],
        "raised_now": [alert_public(a) for a in new],
    }
    return body, new
