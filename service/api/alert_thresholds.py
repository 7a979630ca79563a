"""``GET`` and ``PUT /risk-models/{model}/alert-thresholds``: per-model alert thresholds.

Reading needs the scorer role, changing them the modeler role; every change is audited and
applies to the next drift evaluation of the model.
"""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter

from service.api.deps import ModelDep, ModelerAccess, ScorerAccess, SessionDep, SettingsDep
from service.monitoring.thresholds import set_thresholds, thresholds_view
from service.schemas.monitoring import AlertThresholdsPublic, AlertThresholdsUpdate

router = APIRouter(prefix="/risk-models/{model}/alert-thresholds", tags=["monitoring"])


@router.get("", response_model=AlertThresholdsPublic, summary="The model's alert thresholds")
def get_thresholds(model: ModelDep, settings: SettingsDep, _: ScorerAccess) -> dict[str, Any]:
    return thresholds_view(settings, model)


@router.put("", response_model=AlertThresholdsPublic, summary="Set the model's alert thresholds")
def put_thresholds(
    body: AlertThresholdsUpdate,
    model: ModelDep,
    session: SessionDep,
    settings: SettingsDep,
    who: ModelerAccess,
) -> dict[str, Any]:
    overrides = body.model_dump(exclude_none=True)
    return set_thresholds(
        session=session, model=model, overrides=overrides, settings=settings, key_id=who.key_id
    )
