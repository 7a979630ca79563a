"""The two-sided risk-adjusted Bernoulli CUSUM of a model's serving version.

Segment: the chart watches the scored outcomes of one version (the current champion unless
a version is asked for) in score-time order, from the latest champion change that made it
the champion (its first score if it never served). A champion change therefore resets the
chart to S = 0: the new version starts a new segment.

Control limits: for each chart (odds ratio ``R_up`` > 1 and ``R_down`` < 1) ``h`` is
simulated with :func:`service.stats.cusum.limit_for_arl` for the target in-control average
run length (settings ``cusum_target_arl``, ``cusum_n_sims``; seed 0), risks resampled from
the segment's own predictions (its first records, at most 20,000). Streams of 2 x ARL
records are simulated; a stream that has not signalled by then counts as that long, which
biases the simulated ARL down and so errs towards a higher limit (fewer false alarms). The
limit is kept per ``(model, version, reset time, size class, ARL, simulation, R)`` in memory
and in the store (:mod:`.cusum_limits`): requests stay fast, a restart reuses the stored
limits, and a limit is simulated again only when the segment grows past 1,000 and 5,000
records (at most three times per segment).
"""

from __future__ import annotations

import itertools
from datetime import datetime
from typing import Any

import numpy as np
from sqlalchemy.orm import Session

from models_store.champions import champion_history
from models_store.orm import RiskModel
from models_store.scores import ScoreColumns
from service.config import Settings
from service.monitoring._json import jsonable
from service.monitoring.cusum_limits import LimitCache, limit_key
from service.stats.cusum import ControlLimit, cusum

__all__ = ["cusum_segment", "cusum_view"]


def cusum_segment(
    session: Session, model: RiskModel, version: int | None
) -> tuple[int | None, datetime | None, str]:
    """(version watched, reset time, why) from the champion history."""
    history = champion_history(session=session, model=model)
    if version is None:
        if not history:
            return None, None, "no champion yet"
        version = history[-1].version_number
    for change in reversed(history):
        if change.version_number == version:
            return version, change.changed_at, f"became champion: {change.reason}"
    return version, None, "never champion: from its first score"


def _chart(y: np.ndarray, p: np.ndarray, limit: ControlLimit) -> dict[str, Any]:
    chart = cusum(y, p, odds_ratio=limit.odds_ratio, h=limit.h)
    return {
        "odds_ratio": limit.odds_ratio,
        "h": limit.h,
        "state": chart.state,
        "max": float(chart.path.max()) if chart.path.size else 0.0,
        "signals": list(chart.signals),
        "signal_values": [float(chart.path[i]) for i in chart.signals],
        "first_signal": chart.signals[0] if chart.signals else None,
        "path": _thin(chart.path),
        "limit": jsonable(limit),
    }


def _thin(path: np.ndarray, points: int = 400) -> dict[str, list[float]]:
    """At most ``points`` (index, S) pairs for plotting, keeping each stride's maximum."""
    n = path.shape[0]
    if n <= points:
        return {"index": list(range(n)), "value": path.tolist()}
    edges = np.linspace(0, n, points + 1).astype(np.int64)
    idx = np.array([a + int(np.argmax(path[a:b])) for a, b in itertools.pairwise(edges)])
    return {"index": idx.tolist(), "value": path[idx].tolist()}


def segment_limits(
    *,
    session: Session | None,
    model: RiskModel,
    version: int,
    reset_at: datetime | None,
    p_reference: np.ndarray,
    settings: Settings,
    cache: LimitCache,
) -> dict[str, ControlLimit]:
    """The ``up`` and ``down`` control limits of a segment whose predicted risks are
    ``p_reference`` (the drift view and the start-up warm-up ask for the same keys)."""
    limits: dict[str, ControlLimit] = {}
    for side, R in (("up", settings.cusum_odds_ratio_up), ("down", settings.cusum_odds_ratio_down)):
        key = limit_key(
            model=model,
            version=version,
            reset_at=reset_at,
            n=int(p_reference.size),
            settings=settings,
            odds_ratio=R,
        )
        limits[side] = cache.get(session=session, model=model, key=key, p_reference=p_reference)
    return limits


def cusum_view(
    *,
    session: Session | None,
    model: RiskModel,
    cols: ScoreColumns,
    version: int | None,
    reset_at: datetime | None,
    reason: str,
    settings: Settings,
    cache: LimitCache,
) -> dict[str, Any]:
    """Both charts over ``cols`` (already the segment's records, in score-time order); new
    limits are added to ``session`` (the caller commits)."""
    body: dict[str, Any] = {
        "version": version,
        "reset_at": reset_at,
        "reset_reason": reason,
        "order": "score time",
        "n": cols.n,
        "events": int(cols.outcome.sum()),
        "expected_events": float(cols.probability.sum()),
        "target_arl": settings.cusum_target_arl,
        "statistic": "W = y log R - log(1 - p + R p); S = max(0, S + W); signal at S >= h, "
        "then restart (Steiner et al. 2000)",
    }
    if version is None or cols.n < settings.monitor_min_events:
        body["status"] = "not_enough_outcomes"
        return body
    y, p = cols.outcome.astype(np.float64), cols.probability
    limits = segment_limits(
        session=session,
        model=model,
        version=version,
        reset_at=reset_at,
        p_reference=p,
        settings=settings,
        cache=cache,
    )
    for side, limit in limits.items():
        body[side] = _chart(y, p, limit)
    body["status"] = "ok"
    return body
