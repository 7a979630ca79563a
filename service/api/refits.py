"""Refits: ``POST /risk-models/{model}/refits`` (decide, maybe promote) and ``GET`` the record.

The work runs in the thread pool (it fits models); a second refit of the same model while
one runs gets 409 from the store's cross-process lock.
"""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Path, Request
from starlette.concurrency import run_in_threadpool

from models_store.orm import RefitRun
from models_store.refits import get_refit_run, list_refit_runs
from service.api.deps import ModelDep, ModelerAccess, ScorerAccess, SessionDep, SettingsDep
from service.errors import NotFoundError
from service.refitting import run_refit
from service.schemas import ErrorResponse
from service.schemas.refits import RefitCreate, RefitList, RefitPublic

router = APIRouter(prefix="/risk-models/{model}/refits", tags=["refits"])


@router.post(
    "",
    response_model=RefitPublic,
    summary="Refit or recalibrate on recent outcomes; gate the challenger against the champion",
    responses={409: {"model": ErrorResponse, "description": "A refit of this model is running."}},
)
async def post_refit(
    body: RefitCreate,
    model: ModelDep,
    session: SessionDep,
    settings: SettingsDep,
    request: Request,
    who: ModelerAccess,
) -> dict[str, Any]:
    def work() -> dict[str, Any]:
        return run_refit(
            session=session,
            engine=request.app.state.engine,
            model=model,
            request=body,
            cache=request.app.state.version_cache,
            confidence_level=settings.default_confidence_level,
            key_id=who.key_id,
            lease_seconds=settings.refit_lock_lease_seconds,
        )

    return await run_in_threadpool(work)


def _summary(run: RefitRun) -> dict[str, Any]:
    result = run.result or {}
    return {
        "refit_id": run.id,
        "status": run.status,
        "started_at": run.started_at,
        "finished_at": run.finished_at,
        "decision": result.get("decision"),
        "challenger_version": result.get("challenger_version"),
        "error": result.get("error"),
    }


@router.get("", response_model=RefitList, summary="Refits of a model, newest first")
def get_refits(model: ModelDep, session: SessionDep, _: ScorerAccess) -> dict[str, Any]:
    items = [_summary(r) for r in list_refit_runs(session=session, model=model, limit=100)]
    return {"model": model.name, "items": items, "count": len(items)}


@router.get("/{refit_id}", summary="One refit: its decision in full, or its error")
def get_refit(
    model: ModelDep,
    session: SessionDep,
    _: ScorerAccess,
    refit_id: int = Path(ge=1, le=2_147_483_647),
) -> dict[str, Any]:
    run = get_refit_run(session=session, model=model, run_id=refit_id)
    if run is None:
        raise NotFoundError(
            f"risk model {model.name!r} has no refit {refit_id}",
            field="refit_id",
            value=refit_id,
            remedy=f"list refits with GET /risk-models/{model.name}/refits",
        )
    return {**_summary(run), "result": run.result}
