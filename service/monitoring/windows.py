"""Key calibration measures in consecutive windows of scored outcomes (by count or by time).

Windows by count: blocks of ``size`` records in time order from the first record (the last
block may be short). Windows by time: ``[k * size, (k + 1) * size)`` days since 1970-01-01
UTC, so a window's bounds never move as data arrive. Only the most recent ``max_windows``
are computed (``windows_omitted`` says how many earlier ones were skipped).

Per window (each with its method, interval and counts): O/E with the exact Poisson interval,
calibration-in-the-large and calibration slope (full maximum-likelihood fits of the one- and
two-parameter calibration models by riskfit's own Newton-Raphson on weighted sums,
:mod:`service.stats._calibration_fit`, started at the calibrated model and iterated to
convergence - not a one-step approximation; Wald intervals), Brier score, AUC with the
DeLong interval. The cost is a few passes over each window's records, nothing per record in
Python. A window with fewer than the minimum
outcomes / events has ``status: "not_enough_outcomes"`` and only its counts.
"""

from __future__ import annotations

from typing import Any, Literal

import numpy as np

from service.errors import InvalidInputError
from service.monitoring._json import jsonable
from service.stats.calibration import (
    calibration_intercept,
    calibration_slope,
    observed_expected,
    probability_scores,
)
from service.stats.discrimination import auc_delong

__all__ = ["WindowBy", "drift_windows", "window_bounds"]

WindowBy = Literal["count", "time"]
_DAY_US = 86_400 * 1_000_000


def window_bounds(
    t_us: np.ndarray, by: WindowBy, size: int, max_windows: int
) -> tuple[list[tuple[int, int]], int]:
    """Index ranges ``[(start, stop), ...]`` of sorted times ``t_us`` (n,) and windows omitted."""
    n = int(t_us.shape[0])
    if n == 0:
        return [], 0
    if by == "count":
        starts = np.arange(0, n, size)
    else:
        k = t_us // (size * _DAY_US)
        starts = np.flatnonzero(np.r_[True, k[1:] != k[:-1]])
    stops = np.r_[starts[1:], n]
    omitted = max(0, len(starts) - max_windows)
    pairs = list(zip(starts[omitted:].tolist(), stops[omitted:].tolist(), strict=True))
    return pairs, omitted


def _enough(y: np.ndarray, min_outcomes: int, min_events: int) -> bool:
    events = float(y.sum())
    return y.shape[0] >= min_outcomes and events >= min_events and y.shape[0] - events >= min_events


def _measures(y: np.ndarray, p: np.ndarray, level: float) -> dict[str, Any]:
    slope, _ = calibration_slope(y, p, confidence_level=level)
    out: dict[str, Any] = jsonable(
        {
            "observed_expected": observed_expected(y, p, confidence_level=level),
            "calibration_in_the_large": calibration_intercept(y, p, confidence_level=level),
            "calibration_slope": slope,
            "probability_scores": probability_scores(y, p),
            "auc": auc_delong(y, p, confidence_level=level),
        }
    )
    return out


def _iso(t_us: int) -> str:
    return str(np.datetime_as_string(np.datetime64(t_us, "us"), unit="us")) + "Z"


def drift_windows(
    t: np.ndarray,
    y: np.ndarray,
    p: np.ndarray,
    *,
    by: WindowBy,
    size: int,
    max_windows: int,
    min_outcomes: int,
    min_events: int,
    confidence_level: float,
) -> dict[str, Any]:
    """Windows over records sorted by time ``t`` (datetime64[us], (n,)); see module docstring."""
    if size < 1:
        raise InvalidInputError(
            "the drift window size must be at least 1",
            field="size",
            value=size,
            remedy="give size in records (window=count) or days (window=time)",
        )
    t_us = t.astype("datetime64[us]").astype(np.int64)
    pairs, omitted = window_bounds(t_us, by, size, max_windows)
    out: list[dict[str, Any]] = []
    for index, (a, b) in enumerate(pairs, start=omitted):
        yw, pw = y[a:b], p[a:b]
        events = int(yw.sum())
        if by == "time":
            k = int(t_us[a] // (size * _DAY_US))
            start, end = _iso(k * size * _DAY_US), _iso((k + 1) * size * _DAY_US)
        else:
            start, end = _iso(int(t_us[a])), _iso(int(t_us[b - 1]))
        item: dict[str, Any] = {
            "index": index,
            "start": start,
            "end": end,
            "n": b - a,
            "events": events,
            "observed_rate": events / (b - a),
            "expected_rate": float(pw.mean()),
        }
        if _enough(yw, min_outcomes, min_events):
            item.update(status="ok", **_measures(yw, pw, confidence_level))
        else:
            item["status"] = "not_enough_outcomes"
        out.append(item)
    return {
        "by": by,
        "size": size,
        "unit": "records" if by == "count" else "days",
        "end_is": "last record's time" if by == "count" else "exclusive bound",
        "windows_omitted": omitted,
        "items": out,
    }
