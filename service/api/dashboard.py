"""``GET /dashboard`` and ``GET /dashboard/{model}``: server-rendered HTML pages, and the
sign-in / sign-out pages a browser needs (see :mod:`service.api.dashboard_session`).

The model page shows the champion's calibration report over all its scored outcomes, the
drift view (evaluated as ``GET .../drift`` would, so alerts it finds are stored once), open
alerts, versions and champion history, and the cautions.

The pages are HTML, but their errors are the API's JSON error body (401, 404, 422): the
OpenAPI document says so per status (:data:`JSON_ERRORS`). A model named ``sign-in`` has no
dashboard page (that path is the sign-in form); its API routes are unaffected.
"""

from __future__ import annotations

from typing import Annotated, Any

from fastapi import APIRouter, Depends, Form, Request
from fastapi.responses import FileResponse, HTMLResponse, RedirectResponse, Response

from models_store.alerts import list_alerts
from models_store.champions import champion_history
from models_store.models import list_models, require_model
from models_store.versions import list_versions
from service.api.champion import champion_public
from service.api.dashboard_session import (
    COOKIE,
    SIGN_IN_PATH,
    check_origin,
    check_sign_in_token,
    cookie_secure,
    dashboard_access,
    end_signed_in_session,
    safe_next,
    set_csrf_cookie,
    sign_in_token,
    signed_in_redirect,
)
from service.api.deps import ModelName, Principal, SessionDep, SettingsDep
from service.api.models import model_public
from service.api.monitoring import alerts_public, evaluate_drift, outcome_snapshots, thresholds
from service.dashboard import STATIC_DIR, index_page, model_page, sign_in_page
from service.errors import RiskfitError
from service.monitoring import Window, calibration_view
from service.monitoring.thresholds import for_model
from service.security import authorize

__all__ = ["JSON_ERRORS", "router"]

router = APIRouter(prefix="/dashboard", tags=["dashboard"])

_ERROR_REF = {"schema": {"$ref": "#/components/schemas/ErrorResponse"}}


def _json_error(description: str) -> dict[str, Any]:
    return {"description": description, "content": {"application/json": _ERROR_REF}}


#: The JSON error answers of the HTML routes (FastAPI would file them under text/html).
JSON_ERRORS: dict[int | str, dict[str, Any]] = {
    401: _json_error("No, unknown or revoked API key (clients that do not accept text/html)."),
    403: _json_error("The key lacks the role needed."),
    404: _json_error("Unknown model or path."),
    413: _json_error("Request body over the size limit."),
    422: _json_error("Invalid path, query or form value."),
}
REDIRECT: dict[int | str, dict[str, Any]] = {
    303: {"description": "A browser without a session goes to the sign-in page."}
}
Access = Annotated[Principal, Depends(dashboard_access)]


def _who(principal: Principal, request: Request) -> str | None:
    """The signed-in key's name when the page was reached through the session cookie."""
    signed_in = getattr(request.state, "riskfit_sign_out_token", None) is not None
    return principal.name if signed_in and principal.key_id else None


def _sign_out_token(request: Request) -> str:
    """The sign-out form's token of the session that opened this page ("" without one)."""
    return str(getattr(request.state, "riskfit_sign_out_token", ""))


def _sign_in_form(request: Request, next_path: str, error: str | None, status: int) -> HTMLResponse:
    token, new = sign_in_token(request)
    page = sign_in_page(next_path=safe_next(next_path), error=error, csrf_token=token)
    response = HTMLResponse(page, status_code=status)
    if new:
        set_csrf_cookie(request, response, token)
    return response


@router.get("/static/riskfit.css", include_in_schema=False)
def stylesheet() -> FileResponse:
    return FileResponse(STATIC_DIR / "riskfit.css", media_type="text/css")


@router.get(
    "/sign-in",
    response_class=HTMLResponse,
    summary="Dashboard: the sign-in form (API key)",
    responses=JSON_ERRORS,
)
def sign_in_form(request: Request, next: str | None = None) -> HTMLResponse:
    return _sign_in_form(request, safe_next(next), None, 200)


@router.post(
    "/sign-in",
    response_class=HTMLResponse,
    summary="Dashboard: sign in with an API key (sets a session cookie, 303 to the dashboard)",
    responses={
        **JSON_ERRORS,
        303: {"description": "Signed in: the session cookie is set."},
        403: _json_error("Cross-site request: another Origin, or no matching csrf_token."),
        401: {
            "description": "Unknown or revoked key: the form again, with the reason.",
            "content": {"text/html": {"schema": {"type": "string"}}},
        },
    },
)
def sign_in(
    request: Request,
    session: SessionDep,
    api_key: Annotated[str, Form(min_length=1, max_length=200, description="An API key.")],
    next: Annotated[str | None, Form(max_length=200)] = None,
    csrf_token: Annotated[str | None, Form(max_length=200)] = None,
) -> Response:
    check_origin(request)
    check_sign_in_token(request, csrf_token)
    scope = {**request.scope, "state": {}}
    scope["headers"] = [(b"authorization", f"Bearer {api_key.strip()}".encode())]
    try:
        principal = authorize(Request(scope, request.receive), session, "scorer")
    except RiskfitError as exc:  # 401 unknown / revoked key; the key is never echoed
        return _sign_in_form(request, safe_next(next), f"{exc.message}. {exc.remedy}", 401)
    return signed_in_redirect(request, session, principal, next or "/dashboard")


@router.post(
    "/sign-out",
    summary="Dashboard: sign out (ends the session, clears its cookie, 303 to the sign-in page)",
    response_class=RedirectResponse,
    status_code=303,
    responses={
        303: {"description": "Signed out: the session is ended in the store."},
        403: JSON_ERRORS[403],
        413: JSON_ERRORS[413],
        422: JSON_ERRORS[422],
    },
)
def sign_out(
    request: Request,
    session: SessionDep,
    csrf_token: Annotated[str | None, Form(max_length=200)] = None,
) -> RedirectResponse:
    end_signed_in_session(request, session, csrf_token)
    response = RedirectResponse(SIGN_IN_PATH, status_code=303)
    response.delete_cookie(
        COOKIE, path="/dashboard", httponly=True, samesite="strict", secure=cookie_secure(request)
    )
    return response


@router.get(
    "",
    response_class=HTMLResponse,
    summary="Dashboard: every model",
    responses={**JSON_ERRORS, **REDIRECT},
)
def dashboard_index(request: Request, session: SessionDep, who: Access) -> HTMLResponse:
    models = []
    for m in list_models(session=session, limit=1000, offset=0):
        item = model_public(session, m)
        item["open_alerts"] = len(list_alerts(session=session, model=m, open_only=True))
        models.append(item)
    page = index_page(models, signed_in_as=_who(who, request), csrf_token=_sign_out_token(request))
    return HTMLResponse(page)


@router.get(
    "/{model}",
    response_class=HTMLResponse,
    summary="Dashboard: one model",
    responses={**JSON_ERRORS, **REDIRECT},
)
def dashboard_model(
    request: Request, model: ModelName, session: SessionDep, settings: SettingsDep, who: Access
) -> HTMLResponse:
    row = require_model(session=session, name=model)  # after the access check: 401 before 404
    info = model_public(session, row)
    champion = info["champion_version"]
    window = Window(version=champion)
    snaps = outcome_snapshots(request)
    report = calibration_view(
        session=session, model=row, window=window, settings=settings, snapshots=snaps
    )
    drift = evaluate_drift(request, session, row, window, "count", None, settings, None)
    history: list[dict[str, Any]] = (
        champion_public(session, row)["history"]
        if champion_history(session=session, model=row)
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
        for v in list_versions(session=session, model=row)
    ]
    page = model_page(
        model=info,
        versions=versions,
        history=history,
        report=report,
        drift=drift,
        alerts=alerts_public(session, row, settings, open_only=False, limit=200),
        thresholds=thresholds(for_model(settings, row)),
        signed_in_as=_who(who, request),
        csrf_token=_sign_out_token(request),
    )
    return HTMLResponse(page)
