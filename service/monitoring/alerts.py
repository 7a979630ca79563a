"""Alert rules over a drift view, and their idempotent storage.

Rules (thresholds are settings, defaults in :class:`~service.config.Settings`). A window
rule fires only when the measure's whole confidence interval lies beyond the tolerance, so
it says "miscalibrated by more than the tolerance, with confidence", not merely "not
perfect" (a calibrated stream therefore rarely fires, whatever the window size):

=========================  =======================================================  ======
measure                    fires when                                               default
=========================  =======================================================  ======
calibration_in_the_large   CI above +tol or below -tol (logit scale)                0.2
calibration_slope          CI below ``low`` or above ``high``                       0.8/1.25
observed_expected          CI below ``low`` or above ``high``                       0.8/1.25
cusum_up / cusum_down      the chart signals (S >= h for the target in-control ARL) 10000
psi:<feature>              PSI >= threshold with at least ``psi_min_records``       0.25
=========================  =======================================================  ======

Idempotency: every condition has a key (measure, version, window or CUSUM segment and signal
index, or PSI window start); a condition whose key is already stored is not stored again,
so repeated evaluations of the same data raise nothing new. The store enforces it with a
unique (model, SHA-256 of the key) constraint, so concurrent evaluations cannot both store
one condition (see :func:`store_new_alerts`).
"""

from __future__ import annotations

import hashlib
import json
from collections.abc import Iterator
from datetime import datetime
from typing import Any

from sqlalchemy import select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from models_store._types import utcnow
from models_store.orm import AlertRecord, RiskModel
from service.config import Settings

__all__ = ["alert_public", "conditions", "store_new_alerts"]

Condition = dict[str, Any]


def _bounds(settings: Settings) -> dict[str, tuple[float, float]]:
    tol = settings.alert_citl_tolerance
    return {
        "calibration_in_the_large": (-tol, tol),
        "calibration_slope": (settings.alert_slope_low, settings.alert_slope_high),
        "observed_expected": (settings.alert_oe_low, settings.alert_oe_high),
    }


def _window_conditions(drift: dict[str, Any], settings: Settings) -> Iterator[Condition]:
    version = drift["window"]["version"]
    for w in drift["windows"]["items"]:
        if w["status"] != "ok":
            continue
        for measure, (low, high) in _bounds(settings).items():
            m = w[measure]
            value = m["ratio"] if measure == "observed_expected" else m["estimate"]
            lo, hi = m["ci_lower"], m["ci_upper"]
            if lo is None or hi is None:
                continue
            if hi < low or lo > high:
                above = lo > high
                yield {
                    "measure": measure,
                    "value": value,
                    "threshold": high if above else low,
                    "direction": "above" if above else "below",
                    "version": version,
                    "window": {"by": drift["windows"]["by"], "start": w["start"], "end": w["end"]},
                    "details": {
                        "ci_lower": lo,
                        "ci_upper": hi,
                        "n": w["n"],
                        "events": w["events"],
                        "confidence_level": m["confidence_level"],
                    },
                }


def _cusum_conditions(drift: dict[str, Any]) -> Iterator[Condition]:
    c = drift["cusum"]
    if c.get("status") != "ok":
        return
    for side in ("up", "down"):
        chart = c[side]
        for index, value in zip(chart["signals"], chart["signal_values"], strict=True):
            yield {
                "measure": f"cusum_{side}",
                "value": value,
                "threshold": chart["h"],
                "direction": "above",
                "version": c["version"],
                "window": {"segment_reset_at": c["reset_at"], "signal_index": index},
                "details": {
                    "odds_ratio": chart["odds_ratio"],
                    "n": c["n"],
                    "target_arl": c["target_arl"],
                },
            }


def _psi_conditions(drift: dict[str, Any], settings: Settings) -> Iterator[Condition]:
    d = drift["input_drift"]
    for f in d["features"]:
        if f["status"] != "ok" or f["n_obs"] < settings.psi_min_records:
            continue
        if f["psi"] is not None and f["psi"] >= settings.alert_psi:
            yield {
                "measure": f"psi:{f['feature']}",
                "value": f["psi"],
                "threshold": settings.alert_psi,
                "direction": "above",
                "version": d["version"],
                "window": {"since": d["since"], "n": d["n"]},
                "details": {
                    "n_obs": f["n_obs"],
                    "n_reference": f["n_reference"],
                    "band": f["band"],
                },
            }


def conditions(drift: dict[str, Any], settings: Settings) -> list[Condition]:
    """Every alert condition that holds in the (JSON-ready) drift view."""
    return [
        *_window_conditions(drift, settings),
        *_cusum_conditions(drift),
        *_psi_conditions(drift, settings),
    ]


def _iso(value: Any) -> str:
    return value.isoformat() if isinstance(value, datetime) else str(value)


def _key(c: Condition) -> str:
    window = {k: v for k, v in c["window"].items() if k != "n"}
    return json.dumps([c["measure"], c["version"], window], sort_keys=True, default=_iso)


def store_new_alerts(
    *, session: Session, model: RiskModel, found: list[Condition]
) -> list[AlertRecord]:
    """Store the conditions not stored before (by key); returns the new alert rows.

    Each row carries ``dedup_key`` = hex SHA-256 of the condition's key, unique per model in
    the store (``uq_alert_model_id_dedup_key``). Keys already stored are skipped up front; a
    key stored meanwhile by a concurrent evaluation (another thread, worker or host) makes
    the insert fail inside its own savepoint, and that condition is skipped: two evaluations
    of the same data never store the same alert twice, whatever their interleaving.
    """
    stmt = select(AlertRecord.dedup_key).where(AlertRecord.model_id == model.id)
    known = {k for k in session.scalars(stmt) if k is not None}
    new: list[AlertRecord] = []
    for c in found:
        key = _key(c)
        digest = hashlib.sha256(key.encode()).hexdigest()
        if digest in known:
            continue
        known.add(digest)
        alert = AlertRecord(
            model_id=model.id,
            version_number=c["version"],
            measure=c["measure"],
            value=float(c["value"]),
            threshold=float(c["threshold"]),
            direction=c["direction"],
            window=json.loads(json.dumps(c["window"], default=_iso)),
            details={**c["details"], "key": key},
            raised_at=utcnow(),
            dedup_key=digest,
        )
        try:
            with session.begin_nested():
                session.add(alert)
        except IntegrityError:
            continue  # stored by a concurrent evaluation: the first one stands
        new.append(alert)
    return new


def alert_public(a: AlertRecord) -> dict[str, Any]:
    return {
        "id": a.id,
        "measure": a.measure,
        "value": a.value,
        "threshold": a.threshold,
        "direction": a.direction,
        "version": a.version_number,
        "window": a.window,
        "raised_at": a.raised_at,
        "resolved_at": a.resolved_at,
        "open": a.resolved_at is None,
        "details": {k: v for k, v in a.details.items() if k != "key"},
    }
