"""Liveness, readiness and Prometheus metrics: ``/healthz``, ``/readyz``, ``/metrics``.

These three are open (no key): orchestrators and scrapers call them.
"""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

from fastapi import APIRouter, Request, Response
from prometheus_client import CONTENT_TYPE_LATEST, generate_latest

from models_store.db import ping
from service import __version__
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


@router.get("/metrics", summary="Prometheus metrics of this process", response_class=Response)
def metrics(request: Request) -> Response:
    data = generate_latest(request.app.state.metrics.registry)
    return Response(content=data, media_type=CONTENT_TYPE_LATEST)
