"""``POST /risk-models/{model}/scores``: probabilities with intervals, logged before answering."""

from __future__ import annotations

from fastapi import APIRouter, Request

from service.api.deps import ModelDep, ScorerAccess, SessionDep, SettingsDep
from service.api.responses import JSONBytes
from service.schemas import ErrorResponse, ScoreBatchPublic, ScoreCreate
from service.scoring import score_records

router = APIRouter(prefix="/risk-models/{model}/scores", tags=["scores"])


@router.post(
    "",
    response_model=ScoreBatchPublic,
    summary="Score records with the champion (or a given version)",
    responses={409: {"model": ErrorResponse, "description": "A record key is already used."}},
)
def post_scores(
    body: ScoreCreate,
    model: ModelDep,
    session: SessionDep,
    settings: SettingsDep,
    request: Request,
    _: ScorerAccess,
) -> JSONBytes:
    answer = score_records(
        session=session,
        model=model,
        records=body.records,
        version=body.version,
        confidence_level=body.confidence_level or settings.default_confidence_level,
        explain=body.explain,
        cache=request.app.state.version_cache,
    )
    request.app.state.metrics.records_scored.labels(model.name).inc(answer["n_records"])
    return JSONBytes(answer)
