"""``GET /risk-models`` and ``GET /risk-models/{model}``."""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Query
from sqlalchemy.orm import Session

from models_store.champions import current_champion
from models_store.models import list_models
from models_store.orm import RiskModel
from models_store.versions import latest_version, list_versions
from service.api.deps import ModelDep, ScorerAccess, SessionDep
from service.schemas import RiskModelList, RiskModelPublic

router = APIRouter(prefix="/risk-models", tags=["models"])


def model_public(session: Session, model: RiskModel) -> dict[str, Any]:
    latest = latest_version(session=session, model=model)
    return {
        "name": model.name,
        "description": model.description or None,
        "created_at": model.created_at,
        "champion_version": current_champion(session=session, model=model),
        "latest_version": latest.number if latest else None,
        "n_versions": len(list_versions(session=session, model=model)),
    }


@router.get("", response_model=RiskModelList, summary="List risk models")
def get_models(
    session: SessionDep,
    _: ScorerAccess,
    limit: int = Query(100, ge=1, le=1000),
    offset: int = Query(0, ge=0, le=2_147_483_647),
) -> dict[str, Any]:
    items = [
        model_public(session, m) for m in list_models(session=session, limit=limit, offset=offset)
    ]
    return {"items": items, "count": len(items)}


@router.get("/{model}", response_model=RiskModelPublic, summary="One risk model and its champion")
def get_one_model(model: ModelDep, session: SessionDep, _: ScorerAccess) -> dict[str, Any]:
    return model_public(session, model)
