"""The app factory: ``create_app(settings) -> FastAPI``.

Start-up (lifespan) applies the store's Alembic migrations, builds the SQLAlchemy engine and
session factory into ``app.state``, tunes the garbage collector for a server
(:mod:`service.heap`) and undoes it and disposes of the engine at shutdown. Nothing is built at
import time, so tests create one app per test with their own :class:`Settings`.

Adding a resource: write ``service/api/<resource>.py`` with ``router = APIRouter(...)`` and
append its import path to :data:`ROUTERS`.
"""

from __future__ import annotations

import importlib
from collections.abc import AsyncIterator
from contextlib import asynccontextmanager, nullcontext

from fastapi import APIRouter, Depends, FastAPI

from models_store.db import make_engine, make_session_factory, upgrade
from service import __version__
from service.api.errors import install_error_handlers
from service.api.metrics import AppMetrics, MetricsMiddleware
from service.api.openapi_doc import install_openapi
from service.compute import apply_compute_settings
from service.config import Settings, get_settings
from service.heap import server_heap
from service.limits import LimitsMiddleware
from service.schemas import ErrorResponse
from service.score_append_path import appends_to
from service.score_log_channel import ScoreLogChannel
from service.scoring import VersionCache
from service.security import authenticate_first
from service.web_security import BodyTimeoutMiddleware, SecurityHeadersMiddleware

__all__ = ["ROUTERS", "create_app"]

#: Router modules, in the order their paths appear in the OpenAPI document.
ROUTERS: list[str] = [
    "service.api.health",
    "service.api.models",
    "service.api.versions",
    "service.api.champion",
    "service.api.scores",
    "service.api.outcomes",
    "service.api.monitoring",
    "service.api.alert_thresholds",
    "service.api.dashboard",
    "service.api.refits",
    "service.api.keys",
    "service.api.audit",
]

DESCRIPTION = """
riskfit fits binary-outcome logistic risk models by maximum likelihood with honest
uncertainty, keeps every fitted version with the encoding that produced it, and scores
records with a probability and its confidence interval.

Every error answer has the body `{"error": {"code", "message", "field", "value", "remedy"}}`.

*A risk score supports a decision; it does not make it. Defer to local regulation and
licensed practice.*
"""


def _routers() -> list[APIRouter]:
    # Every listed module must exist: a missing one is a packaging error, not a feature toggle.
    return [importlib.import_module(name).router for name in ROUTERS]


def create_app(settings: Settings | None = None) -> FastAPI:
    """Build the riskfit ASGI app; ``settings`` defaults to the environment's."""
    settings = settings or get_settings()
    apply_compute_settings(settings)

    @asynccontextmanager
    async def lifespan(app: FastAPI) -> AsyncIterator[None]:
        engine = make_engine(settings.database_url, busy_timeout_ms=settings.sqlite_busy_timeout_ms)
        upgrade(engine)
        app.state.engine = engine
        app.state.session_factory = make_session_factory(engine)
        channel = None
        try:
            if settings.score_log_process and appends_to(engine):  # service.score_log_channel
                channel = app.state.score_channel = ScoreLogChannel(
                    engine,
                    busy_timeout_ms=settings.sqlite_busy_timeout_ms,
                    synchronous="FULL",  # as make_engine above
                    seen=app.state.version_cache.champion_seen,
                )
            with server_heap() if settings.tune_gc else nullcontext():  # service.heap
                yield
        finally:
            if channel is not None:
                app.state.score_channel = None
                await channel.close()
            engine.dispose()

    app = FastAPI(
        title="riskfit",
        version=__version__,
        description=DESCRIPTION,
        lifespan=lifespan,
        responses={
            404: {"model": ErrorResponse, "description": "Unknown model, version or path."},
            422: {"model": ErrorResponse, "description": "Invalid input or no valid fit."},
            401: {"model": ErrorResponse, "description": "No, unknown or revoked API key."},
            403: {"model": ErrorResponse, "description": "The key lacks the role needed."},
            413: {"model": ErrorResponse, "description": "Request body over the size limit."},
        },
    )
    app.state.settings = settings
    app.state.metrics = AppMetrics()
    app.state.version_cache = VersionCache()
    install_error_handlers(app)
    for router in _routers():
        app.include_router(router, dependencies=[Depends(authenticate_first)])
    install_openapi(app, settings)  # service.api.openapi_doc: what is enforced, documented
    app.add_middleware(LimitsMiddleware, settings=settings)
    app.add_middleware(MetricsMiddleware, metrics=app.state.metrics)
    # web security (service/web_security.py): headers by path prefix; a stalled body is a 408
    app.add_middleware(SecurityHeadersMiddleware)
    app.add_middleware(BodyTimeoutMiddleware, timeout=settings.body_timeout_seconds)
    return app
