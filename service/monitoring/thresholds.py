"""Per-model alert thresholds: documented defaults in :class:`~service.config.Settings`,
overridden per model by a modeler (stored on the model row, audited).

The effective thresholds of a model are the settings with the model's overrides applied;
every alert evaluation, listing, plot and dashboard page of that model uses them.
"""

from __future__ import annotations

from typing import Any

from sqlalchemy.orm import Session

from models_store.audit import record
from models_store.orm import RiskModel
from service.config import Settings
from service.errors import InvalidInputError

__all__ = ["THRESHOLD_FIELDS", "for_model", "set_thresholds", "thresholds_view"]

#: Settings that are alert thresholds (the per-model override names drop the ``alert_``).
THRESHOLD_FIELDS = (
    "alert_citl_tolerance",
    "alert_slope_low",
    "alert_slope_high",
    "alert_oe_low",
    "alert_oe_high",
    "alert_psi",
)
_PAIRS = (("slope_low", "slope_high"), ("oe_low", "oe_high"))


def _overrides(model: RiskModel) -> dict[str, float]:
    stored = model.alert_thresholds or {}
    return {k: float(v) for k, v in stored.items() if f"alert_{k}" in THRESHOLD_FIELDS}


def for_model(settings: Settings, model: RiskModel) -> Settings:
    """The settings with ``model``'s alert-threshold overrides applied."""
    overrides = _overrides(model)
    if not overrides:
        return settings
    return settings.model_copy(update={f"alert_{k}": v for k, v in overrides.items()})


def thresholds_view(settings: Settings, model: RiskModel) -> dict[str, Any]:
    """``{"model", "effective", "overrides", "defaults"}`` with names without ``alert_``."""
    effective = for_model(settings, model)
    return {
        "model": model.name,
        "effective": {f[6:]: getattr(effective, f) for f in THRESHOLD_FIELDS},
        "overrides": _overrides(model),
        "defaults": {f[6:]: getattr(settings, f) for f in THRESHOLD_FIELDS},
    }


def set_thresholds(
    *,
    session: Session,
    model: RiskModel,
    overrides: dict[str, float],
    settings: Settings,
    key_id: int | None,
) -> dict[str, Any]:
    """Replace ``model``'s overrides (absent names fall back to the defaults); commit; audit."""
    merged = {f[6:]: getattr(settings, f) for f in THRESHOLD_FIELDS} | overrides
    for low, high in _PAIRS:
        if merged[low] >= merged[high]:
            raise InvalidInputError(
                f"{low} ({merged[low]:g}) must be below {high} ({merged[high]:g})",
                field=low if low in overrides else high,
                value=merged[low] if low in overrides else merged[high],
                remedy=f"choose {low} < {high}; omit a name to use its default",
            )
    before = _overrides(model)
    model.alert_thresholds = dict(overrides)
    record(
        session=session,
        action="alert_thresholds.change",
        key_id=key_id,
        model_name=model.name,
        details={"before": before, "after": dict(overrides)},
    )
    session.commit()
    return thresholds_view(settings, model)
