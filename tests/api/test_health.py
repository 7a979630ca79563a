"""Liveness, readiness, metrics and the shape of errors for unknown paths."""

from __future__ import annotations

from prometheus_client.parser import text_string_to_metric_families

from service.app import create_app
from service.config import Settings
from tests.api.conftest import ApiClient


def test_healthz_and_readyz(api: ApiClient) -> None:
    r = api.get("/healthz")
    assert r.status_code == 200
    assert r.json()["status"] == "ok"
    assert r.json()["time"].endswith("Z")  # ISO 8601 UTC
    r = api.get("/readyz")
    assert r.status_code == 200
    assert r.json() == {**r.json(), "status": "ready", "database": "ok"}


def test_metrics_count_requests_per_app(api: ApiClient) -> None:
    api.get("/healthz")
    api.get("/healthz")
    r = api.get("/metrics")
    assert r.status_code == 200
    assert r.headers["content-type"].startswith("text/plain")
    # Parsed with prometheus_client's own text-format parser.
    samples = {
        (s.name, s.labels.get("route"), s.labels.get("status")): s.value
        for fam in text_string_to_metric_families(r.text)
        for s in fam.samples
    }
    assert samples[("riskfit_http_requests_total", "/healthz", "200")] == 2.0


def test_two_apps_do_not_share_a_registry(tmp_path: object, settings: Settings) -> None:
    a, b = create_app(settings), create_app(settings)
    assert a.state.metrics.registry is not b.state.metrics.registry


def test_unknown_path_has_the_error_shape(api: ApiClient) -> None:
    r = api.get("/no-such-thing")
    assert r.status_code == 404
    err = r.json()["error"]
    assert err["code"] == "no_such_path"
    assert err["field"] == "path" and err["value"] == "/no-such-thing"
    assert "/docs" in err["remedy"]


def test_readyz_is_503_when_the_database_is_gone(api: ApiClient) -> None:
    api.app.state.engine.dispose()
    # Point the app at a database file inside a directory that does not exist.
    from models_store.db import make_engine

    api.app.state.engine = make_engine("sqlite:////nonexistent-dir/x/riskfit.db")
    r = api.get("/readyz")
    assert r.status_code == 503
    err = r.json()["error"]
    assert err["code"] == "store_unavailable"
    assert err["remedy"]


def test_openapi_document_builds(api: ApiClient) -> None:
    r = api.get("/openapi.json")
    assert r.status_code == 200
    assert r.json()["info"]["title"] == "riskfit"
