"""Monitoring routes: calibration report, drift view, alerts, and their plots.

* ``GET /risk-models/{model}/calibration`` (+ ``/calibration/reliability.{svg|png}``)
* ``GET /risk-models/{model}/drift`` (+ ``/drift/measures.{svg|png}``, ``/drift/psi.{svg|png}``)
* ``GET /risk-models/{model}/alerts``, ``POST /risk-models/{model}/alerts/{alert_id}/resolution``

The router's lifespan lists the models with outcomes when the app starts and, if there are
any, starts :class:`service.monitoring.warm.Warmer` (outcome snapshots and CUSUM limits built
in the background; ``/readyz`` does not wait for it); it stops it at shutdown.
"""

from __future__ import annotations

import threading
from collections.abc import AsyncIterator, Callable
from contextlib import asynccontextmanager
from typing import Annotated, Any, Literal, TypeVar, cast

from fastapi import APIRouter, Depends, FastAPI, Path, Query, Request, Response
from prometheus_client import Counter, Gauge
from starlette.concurrency import run_in_threadpool

from models_store.alerts import list_alerts
from models_store.orm import AlertRecord, RiskModel
from models_store.versions import require_version
from service.api.deps import ModelDep, ModelerAccess, ScorerAccess, SessionDep, SettingsDep
from service.api.responses import JSONBytes
from service.config import Settings
from service.errors import InvalidInputError
from service.monitoring import (
    LimitCache,
    OutcomeSnapshots,
    Window,
    alert_public,
    calibration_view,
    drift_view,
)
from service.monitoring.alert_resolution import resolve_model_alert
from service.monitoring.thresholds import THRESHOLD_FIELDS as ALERT_THRESHOLDS
from service.monitoring.thresholds import for_model
from service.monitoring.warm import Warmer, recent_model_ids
from service.plots import PlotFormat, drift_figure, psi_figure, reliability_figure, render
from service.schemas import ErrorResponse
from service.schemas.common import Instant
from service.schemas.monitoring import AlertList, AlertPublic, CalibrationReportPublic, DriftPublic

MEDIA = {"svg": "image/svg+xml", "png": "image/png"}
# The alert thresholds (per-model overridable) and the fixed monitoring settings beside them.
THRESHOLD_FIELDS = (
    *ALERT_THRESHOLDS,
    "psi_min_records",
    "cusum_target_arl",
    "cusum_odds_ratio_up",
    "cusum_odds_ratio_down",
)
_state_lock = threading.Lock()
T = TypeVar("T")


def get_window(
    model: ModelDep,
    session: SessionDep,
    since: Annotated[
        Instant | None, Query(description="Window start (inclusive), ISO 8601 with an offset.")
    ] = None,
    until: Annotated[
        Instant | None,
        Query(description="Window end (exclusive), ISO 8601 with an offset; after `since`."),
    ] = None,
    on: Annotated[
        Literal["score", "outcome"], Query(description="Window on score time or outcome time.")
    ] = "score",
    version: Annotated[
        int | None, Query(ge=1, le=2_147_483_647, description="One version (default: all).")
    ] = None,
) -> Window:
    """The ``since``/``until``/``on``/``version`` query, checked (form, zone and range by
    :data:`service.schemas.common.Instant`; here the order and the version)."""
    if since is not None and until is not None and since >= until:
        raise InvalidInputError(
            "the window is empty: since must be before until",
            field="until",
            value=until.isoformat(),
            remedy="give an until later than since",
        )
    if version is not None:
        require_version(session=session, model=model, number=version)
    return Window(since=since, until=until, on=on, version=version)


WindowDep = Annotated[Window, Depends(get_window)]
Level = Annotated[float | None, Query(gt=0.0, lt=1.0, description="Default: the setting.")]
By = Annotated[
    Literal["count", "time"],
    Query(alias="window", description="Windows of `size` records (count) or days (time)."),
]
Size = Annotated[int | None, Query(ge=1, le=10_000_000, description="Records or days.")]


def _app_state(app: FastAPI, name: str, factory: Callable[[], T]) -> T:
    """``app.state.<name>``, created by ``factory`` on first use (thread-safe)."""
    with _state_lock:
        obj = getattr(app.state, name, None)
        if obj is None:
            obj = factory()
            setattr(app.state, name, obj)
    return cast(T, obj)


def _limit_cache(request: Request) -> LimitCache:
    return _app_state(request.app, "cusum_limits", LimitCache)


def outcome_snapshots(request: Request) -> OutcomeSnapshots:
    """The app's in-memory outcome columns per model (see service.monitoring.snapshot)."""
    return _app_state(request.app, "outcome_snapshots", OutcomeSnapshots)


@asynccontextmanager
async def warm_at_start(app: FastAPI) -> AsyncIterator[None]:
    """Warm the monitoring state in the background while the app serves (see module doc):
    one query for the models with outcomes, then a thread only if there are any."""
    snapshots = _app_state(app, "outcome_snapshots", OutcomeSnapshots)
    factory = app.state.session_factory
    ids = await run_in_threadpool(recent_model_ids, factory, snapshots.max_models)
    cache = _app_state(app, "cusum_limits", LimitCache)
    warmer = Warmer(factory, snapshots, cache, app.state.settings, model_ids=ids)
    app.state.monitoring_warm = warmer.start()
    try:
        yield
    finally:
        await run_in_threadpool(warmer.stop)


router = APIRouter(prefix="/risk-models/{model}", tags=["monitoring"], lifespan=warm_at_start)


def _alert_metrics(request: Request) -> tuple[Counter, Gauge]:
    """The alert collectors on the app's own registry (created on first use)."""
    with _state_lock:
        pair = getattr(request.app.state, "alert_metrics", None)
        if pair is None:
            registry = request.app.state.metrics.registry
            pair = (
                Counter(
                    "riskfit_alerts_raised",
                    "Monitoring alerts stored, by model and measure.",
                    ("model", "measure"),
                    registry=registry,
                ),
                Gauge(
                    "riskfit_alerts_open",
                    "Open monitoring alerts per model (set by drift evaluations, resolutions).",
                    ("model",),
                    registry=registry,
                ),
            )
            request.app.state.alert_metrics = pair
    return pair


def thresholds(settings: Settings) -> dict[str, Any]:
    return {name: getattr(settings, name) for name in THRESHOLD_FIELDS}


def evaluate_drift(
    request: Request,
    session: Any,
    model: RiskModel,
    window: Window,
    by: str,
    size: int | None,
    settings: Settings,
    level: float | None,
) -> dict[str, Any]:
    """Run the drift view and count the alerts it stored in ``/metrics``."""
    body, new = drift_view(
        session=session,
        model=model,
        window=window,
        by=by,  # type: ignore[arg-type]
        size=size,
        settings=settings,
        cache=_limit_cache(request),
        confidence_level=level,
        snapshots=outcome_snapshots(request),
    )
    raised, open_gauge = _alert_metrics(request)
    for alert in new:
        raised.labels(model.name, alert.measure).inc()
    open_gauge.labels(model.name).set(
        len(list_alerts(session=session, model=model, open_only=True))
    )
    return body


@router.get(
    "/calibration",
    response_model=CalibrationReportPublic,
    summary="Calibration report of a window of scored outcomes",
    description="Every measure carries its method, interval and level, and the counts. A "
    "window with too few outcomes answers 200 with `status: not_enough_outcomes`, the counts "
    "and the minimum counts, and no measures.",
)
def get_calibration(
    request: Request,
    model: ModelDep,
    session: SessionDep,
    settings: SettingsDep,
    window: WindowDep,
    _: ScorerAccess,
    confidence_level: Level = None,
) -> JSONBytes:
    body = calibration_view(
        session=session,
        model=model,
        window=window,
        settings=settings,
        confidence_level=confidence_level,
        snapshots=outcome_snapshots(request),
    )
    return JSONBytes(body)


@router.get(
    "/calibration/reliability.{fmt}",
    summary="Reliability diagram (SVG or PNG)",
    response_class=Response,
)
def get_reliability_plot(
    request: Request,
    fmt: PlotFormat,
    model: ModelDep,
    session: SessionDep,
    settings: SettingsDep,
    window: WindowDep,
    _: ScorerAccess,
) -> Response:
    snaps = outcome_snapshots(request)
    body = calibration_view(
        session=session, model=model, window=window, settings=settings, snapshots=snaps
    )
    return Response(render(reliability_figure(body), fmt), media_type=MEDIA[fmt])


@router.get(
    "/drift",
    response_model=DriftPublic,
    summary="Calibration over time, CUSUM, input drift and alerts",
    description="Key measures in consecutive windows, the two-sided risk-adjusted Bernoulli "
    "CUSUM of the serving version since it became champion, PSI per feature against the "
    "version's training reference, and the alert conditions found. Idempotent, but not "
    "read-only: a condition seen for the first time is stored as an alert (once).",
)
def get_drift(
    request: Request,
    model: ModelDep,
    session: SessionDep,
    settings: SettingsDep,
    window: WindowDep,
    _: ScorerAccess,
    by: By = "count",
    size: Size = None,
    confidence_level: Level = None,
) -> JSONBytes:
    body = evaluate_drift(request, session, model, window, by, size, settings, confidence_level)
    return JSONBytes(body)


@router.get(
    "/drift/{plot}.{fmt}",
    summary="Drift plots: `measures` or `psi` (SVG or PNG)",
    response_class=Response,
)
def get_drift_plot(
    plot: Literal["measures", "psi"],
    fmt: PlotFormat,
    request: Request,
    model: ModelDep,
    session: SessionDep,
    settings: SettingsDep,
    window: WindowDep,
    _: ScorerAccess,
    by: By = "count",
    size: Size = None,
) -> Response:
    body = evaluate_drift(request, session, model, window, by, size, settings, None)
    fig = (
        drift_figure(body, thresholds(for_model(settings, model)))
        if plot == "measures"
        else psi_figure(body)
    )
    return Response(render(fig, fmt), media_type=MEDIA[fmt])


def alerts_public(
    session: Any, model: RiskModel, settings: Settings, open_only: bool, limit: int
) -> dict[str, Any]:
    rows: list[AlertRecord] = list_alerts(
        session=session, model=model, open_only=open_only, limit=limit
    )
    items = [alert_public(a) for a in rows]
    return {
        "model": model.name,
        "count": len(items),
        "open": sum(1 for a in items if a["open"]),
        "items": items,
        "thresholds": thresholds(for_model(settings, model)),
    }


@router.get("/alerts", response_model=AlertList, summary="Stored monitoring alerts, newest first")
def get_alerts(
    model: ModelDep,
    session: SessionDep,
    settings: SettingsDep,
    _: ScorerAccess,
    open_only: Annotated[bool, Query(description="Only unresolved alerts.")] = False,
    limit: Annotated[int, Query(ge=1, le=10_000)] = 500,
) -> JSONBytes:
    return JSONBytes(alerts_public(session, model, settings, open_only, limit))


@router.post(
    "/alerts/{alert_id}/resolution",
    response_model=AlertPublic,
    summary="Resolve (close) an open alert",
    description="Marks the alert resolved now and answers it with `open: false` and "
    "`resolved_at`. Needs the modeler role; audited as `alert.resolve` with the acting key. "
    "An unknown alert id (or another model's) is 404 and an alert already resolved is 409, "
    "both naming `alert_id`. Resolving records a decision and changes no measure: the same "
    "condition is not raised again, later windows or CUSUM signals raise new alerts.",
    responses={409: {"model": ErrorResponse, "description": "The alert is already resolved."}},
)
def post_alert_resolution(
    request: Request,
    model: ModelDep,
    session: SessionDep,
    who: ModelerAccess,
    alert_id: Annotated[
        int, Path(ge=1, le=2_147_483_647, description="The alert's `id` from the alert list.")
    ],
) -> JSONBytes:
    body = resolve_model_alert(session=session, model=model, alert_id=alert_id, key_id=who.key_id)
    _, open_gauge = _alert_metrics(request)
    open_gauge.labels(model.name).set(
        len(list_alerts(session=session, model=model, open_only=True))
    )
    return JSONBytes(body)
