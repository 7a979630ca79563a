"""``GET /dashboard`` and ``GET /dashboard/{model}``: server-rendered HTML pages.

The model page shows the champion's calibration report over all its scored outcomes, the
drift view (evaluated as ``GET .../drift`` would, so alerts it finds are stored once), open
alerts, versions and champion history, and the cautions.
"""

from __future__ import annotations

from typing import Any

from fastapi import APIRouter, Request
from fastapi.responses import FileResponse, HTMLResponse

from models_store.alerts import list_alerts
from models_store.champions import champion_history
from models_store.models import list_models
from models_store.versions import list_versions
from service.api.champion import champion_public
from service.api.deps import ModelDep, ScorerAccess, SessionDep, SettingsDep
from service.api.models import model_public
from service.api.monitoring import alerts_public, evaluate_drift, thresholds
from service.dashboard import STATIC_DIR, index_page, model_page
from service.monitoring import Window, calibration_view

router = APIRouter(prefix="/dashboard", tags=["dashboard"])


@router.get("/static/riskfit.css", include_in_schema=False)
def stylesheet() -> FileResponse:
    return FileResponse(STATIC_DIR / "riskfit.css", media_type="text/css")


@router.get("", response_class=HTMLResponse, summary="Dashboard: every model")
def dashboard_index(session: SessionDep, _: ScorerAccess) -> HTMLResponse:
    models = []
    for m in list_models(session=session, limit=1000, offset=0):
        item = model_public(session, m)
        item["open_alerts"] = len(list_alerts(session=session, model=m, open_only=True))
        models.append(item)
    return HTMLResponse(index_page(models))


@router.get("/{model}", response_class=HTMLResponse, summary="Dashboard: one model")
def dashboard_model(
    request: Request, model: ModelDep, session: SessionDep, settings: SettingsDep, _: ScorerAccess
) -> HTMLResponse:
    info = model_public(session, model)
    champion = info["champion_version"]
    window = Window(version=champion)
    report = calibration_view(session=session, model=model, window=window, settings=settings)
    drift = evaluate_drift(request, session, model, window, "count", None, settings, None)
    history: list[dict[str, Any]] = (
        champion_public(session, model)["history"]
        if champion_history(session=session, model=model)
        else []
    )
    versions = [
        {
            "number": v.number,
            "origin": v.origin,
            "method": v.method,
            "n_obs": v.n_obs,
            "n_events": v.n_events,
            "created_at": v.created_at,
        }
        for v in list_versions(session=session, model=model)
    ]
    page = model_page(
        model=info,
        versions=versions,
        history=history,
        report=report,
        drift=drift,
        alerts=alerts_public(session, model, settings, open_only=False, limit=200),
        thresholds=thresholds(settings),
    )
    return HTMLResponse(page)
