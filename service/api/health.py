"""Liveness, readiness and Prometheus metrics: ``/healthz``, ``/readyz``, ``/metrics``.

Health checks are open (no key): orchestrators call them. ``/metrics`` needs an API key unless
the setting ``metrics_access`` is ``open`` (:func:`service.api.metrics.metrics_gate`).
"""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

from fastapi import APIRouter, Depends, Request, Response
from prometheus_client import CONTENT_TYPE_LATEST, generate_latest

from models_store.db import ping
from service import __version__
from service.api.metrics import metrics_gate
from service.schemas import HealthPublic, ReadinessPublic

router = APIRouter(tags=["health"])


@router.get("/healthz", response_model=HealthPublic, summary="Liveness: the process answers")
def healthz() -> dict[str, Any]:
    return {"status": "ok", "version": __version__, "time": datetime.now(UTC)}


@router.get(
    "/readyz",
    response_model=ReadinessPublic,
    summary="Readiness: the database answers",
    responses={503: {"description": "The database is unreachable."}},
)
def readyz(request: Request) -> dict[str, Any]:
    ping(request.app.state.engine)  # raises StoreError (503) when the database is unreachable
    return {"status": "ready", "database": "ok", "time": datetime.now(UTC)}


@router.get(
    "/metrics",
    summary="Prometheus metrics of this process (an API key unless RISKFIT_METRICS_ACCESS=open)",
    response_class=Response,
    dependencies=[Depends(metrics_gate)],
)
def metrics(request: Request) -> Response:
    data = generate_latest(request.app.state.metrics.registry)
    return Response(content=data, media_type=CONTENT_TYPE_LATEST)
