"""``GET`` and ``PUT /risk-models/{model}/champion``: which version serves, with its history.

Rollback is promoting an older version; every change is kept with its time and reason.
"""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter
from sqlalchemy.orm import Session

from models_store.champions import champion_history, set_champion
from models_store.orm import RiskModel
from service.api.deps import ModelDep, ModelerAccess, ScorerAccess, SessionDep
from service.errors import VersionNotFoundError
from service.schemas import ChampionChange, ChampionPublic

router = APIRouter(prefix="/risk-models/{model}/champion", tags=["champion"])


def champion_public(session: Session, model: RiskModel) -> dict[str, Any]:
    history = champion_history(session=session, model=model)
    if not history:
        raise VersionNotFoundError(
            f"risk model {model.name!r} has no champion yet",
            field="model",
            value=model.name,
            remedy=f"fit a version with POST /risk-models/{model.name}/versions",
        )
    current = history[-1]
    return {
        "model": model.name,
        "version": current.version_number,
        "since": current.changed_at,
        "reason": current.reason,
        "history": [
            {
                "version": c.version_number,
                "previous_version": c.previous_version_number,
                "reason": c.reason,
                "changed_at": c.changed_at,
                "changed_by_key_id": c.changed_by_key_id,
            }
            for c in reversed(history)
        ],
    }


@router.get("", response_model=ChampionPublic, summary="The serving version and its history")
def get_champion(model: ModelDep, session: SessionDep, _: ScorerAccess) -> dict[str, Any]:
    return champion_public(session, model)


@router.put("", response_model=ChampionPublic, summary="Promote a version (or roll back)")
def put_champion(
    body: ChampionChange, model: ModelDep, session: SessionDep, who: ModelerAccess
) -> dict[str, Any]:
    set_champion(
        session=session, model=model, number=body.version, reason=body.reason, key_id=who.key_id
    )
    session.commit()
    return champion_public(session, model)
