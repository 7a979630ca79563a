"""Prometheus metrics kept in a per-app ``CollectorRegistry`` (tests build many apps).

:class:`AppMetrics` holds the collectors; :class:`MetricsMiddleware` is a pure ASGI
middleware (no per-request task or body buffering) that counts requests by route template,
method and status, and times them. :func:`metrics_gate` is the access rule of
``GET /metrics`` (setting ``metrics_access``: ``key`` by default, ``open`` for a scraper that
alone can reach the port).
"""

from __future__ import annotations

import time
from dataclasses import dataclass, field
from typing import Any

from fastapi import Request
from prometheus_client import CollectorRegistry, Counter, Histogram
from starlette.types import ASGIApp, Message, Receive, Scope, Send

__all__ = ["AppMetrics", "MetricsMiddleware", "metrics_gate"]


@dataclass
class AppMetrics:
    """Collectors of one app; ``registry`` is what ``GET /metrics`` exposes."""

    registry: CollectorRegistry = field(
        default_factory=lambda: CollectorRegistry(auto_describe=True)
    )

    def __post_init__(self) -> None:
        # Children by label values: prometheus_client checks and locks on every labels() call,
        # a few microseconds twice per request. Label sets are bounded (route templates,
        # methods, statuses, model names).
        self._request_children: dict[tuple[str, str, int], tuple[Any, Any]] = {}
        self._scored_children: dict[str, Any] = {}
        r = self.registry
        self.requests = Counter(
            "riskfit_http_requests",
            "HTTP requests by route, method and status.",
            ("route", "method", "status"),
            registry=r,
        )
        self.latency = Histogram(
            "riskfit_http_request_seconds",
            "HTTP request duration by route.",
            ("route", "method"),
            registry=r,
            buckets=(0.001, 0.0025, 0.005, 0.01, 0.025, 0.05, 0.1, 0.25, 0.5, 1, 2.5, 5, 10, 30),
        )
        self.records_scored = Counter(
            "riskfit_records_scored",
            "Records scored (one score log row each).",
            ("model",),
            registry=r,
        )
        self.versions_fitted = Counter(
            "riskfit_versions_fitted",
            "Model versions fitted and stored.",
            ("model", "method"),
            registry=r,
        )
        self.fit_seconds = Histogram(
            "riskfit_fit_seconds",
            "Wall time of a fit from parsed data to stored version.",
            registry=r,
            buckets=(0.01, 0.05, 0.1, 0.5, 1, 2, 5, 10, 30, 60, 300),
        )

    def request_done(self, route: str, method: str, status: int, seconds: float) -> None:
        """Count one request and observe its duration."""
        key = (route, method, status)
        children = self._request_children.get(key)
        if children is None:
            children = self._request_children[key] = (
                self.requests.labels(route, method, str(status)),
                self.latency.labels(route, method),
            )
        children[0].inc()
        children[1].observe(seconds)

    def scored(self, model: str, records: int) -> None:
        """Count ``records`` records scored with ``model``."""
        child = self._scored_children.get(model)
        if child is None:
            child = self._scored_children[model] = self.records_scored.labels(model)
        child.inc(records)


class MetricsMiddleware:
    """Counts and times every HTTP request; the route label is the path template."""

    def __init__(self, app: ASGIApp, metrics: AppMetrics) -> None:
        self.app = app
        self.metrics = metrics

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http":
            await self.app(scope, receive, send)
            return
        start = time.perf_counter()
        status = 500

        async def send_wrapper(message: Message) -> None:
            nonlocal status
            if message["type"] == "http.response.start":
                status = message["status"]
            await send(message)

        try:
            await self.app(scope, receive, send_wrapper)
        finally:
            route = scope.get("route")
            label = getattr(route, "path", None) or "unmatched"
            method = scope.get("method", "")
            self.metrics.request_done(label, method, status, time.perf_counter() - start)


async def metrics_gate(request: Request) -> None:
    """``GET /metrics`` access: any valid API key (role scorer or higher) unless the setting
    ``metrics_access`` is ``open``. The metrics name models and their volumes, so a port that
    strangers can reach must not show them without a key."""
    if request.app.state.settings.metrics_access == "open":
        return
    from service.security import admit  # security imports the api package

    await admit(request, "scorer")
