"""Role x endpoint: every route of the real app against every credential; zero unauthorised
successes. The least role of each route is declared once in :data:`LEAST_ROLE`, and the test
fails if a route is added without an entry (or an entry names a route that is gone)."""

from __future__ import annotations

import re
from collections.abc import Iterator
from typing import Any

import pytest
from fastapi.routing import APIRoute

from service.api.deps import ROLE_RANK
from service.app import create_app
from service.config import Settings
from tests.api.conftest import ApiClient
from tests.security.conftest import CREDENTIALS, MODEL

OPEN = "open"
LEAST_ROLE: dict[tuple[str, str], str] = {
    ("GET", "/healthz"): OPEN,
    ("GET", "/readyz"): OPEN,
    ("GET", "/metrics"): "scorer",  # RISKFIT_METRICS_ACCESS=key, the default
    ("GET", "/dashboard/static/riskfit.css"): OPEN,
    ("GET", "/dashboard/sign-in"): OPEN,
    ("POST", "/dashboard/sign-in"): OPEN,
    ("POST", "/dashboard/sign-out"): OPEN,
    ("GET", "/risk-models"): "scorer",
    ("GET", "/risk-models/{model}"): "scorer",
    ("POST", "/risk-models/{model}/versions"): "modeler",
    ("GET", "/risk-models/{model}/versions"): "scorer",
    ("GET", "/risk-models/{model}/versions/{number}"): "scorer",
    ("GET", "/risk-models/{model}/champion"): "scorer",
    ("PUT", "/risk-models/{model}/champion"): "modeler",
    ("POST", "/risk-models/{model}/scores"): "scorer",
    ("POST", "/risk-models/{model}/outcomes"): "scorer",
    ("GET", "/risk-models/{model}/calibration"): "scorer",
    ("GET", "/risk-models/{model}/calibration/reliability.{fmt}"): "scorer",
    ("GET", "/risk-models/{model}/drift"): "scorer",
    ("GET", "/risk-models/{model}/drift/{plot}.{fmt}"): "scorer",
    ("GET", "/risk-models/{model}/alerts"): "scorer",
    ("POST", "/risk-models/{model}/alerts/{alert_id}/resolution"): "modeler",
    ("GET", "/risk-models/{model}/alert-thresholds"): "scorer",
    ("PUT", "/risk-models/{model}/alert-thresholds"): "modeler",
    ("GET", "/dashboard"): "scorer",
    ("GET", "/dashboard/{model}"): "scorer",
    ("POST", "/risk-models/{model}/refits"): "modeler",
    ("GET", "/risk-models/{model}/refits"): "scorer",
    ("GET", "/risk-models/{model}/refits/{refit_id}"): "scorer",
    ("POST", "/api-keys"): "admin",
    ("GET", "/api-keys"): "admin",
    ("DELETE", "/api-keys/{key_id}"): "admin",
    ("GET", "/audit-events"): "admin",
}
# path parameters: the fitted model, an existing version, ids that do not exist (no side effects)
PARAMS = {"model": MODEL, "number": "1", "key_id": "999999", "refit_id": "999999",
          "alert_id": "999999", "fmt": "svg", "plot": "calibration"}  # fmt: skip


def walk(routes: Any) -> Iterator[APIRoute]:
    """Every APIRoute, also inside included routers (FastAPI nests them)."""
    for route in routes:
        if isinstance(route, APIRoute):
            yield route
        elif hasattr(route, "original_router"):
            yield from walk(route.original_router.routes)


def app_routes() -> set[tuple[str, str]]:
    app = create_app(Settings(database_url="sqlite://"))
    return {(m, r.path) for r in walk(app.routes) for m in r.methods if m != "HEAD"}


def test_the_table_covers_every_route_of_the_real_app() -> None:
    routes = app_routes()
    assert routes - set(LEAST_ROLE) == set(), "routes without a declared least role"
    assert set(LEAST_ROLE) - routes == set(), "declared routes the app no longer has"


def _url(path: str) -> str:
    return re.sub(r"\{(\w+)\}", lambda m: PARAMS[m.group(1)], path)


@pytest.mark.parametrize("credential", CREDENTIALS)
def test_role_by_endpoint_matrix(
    secured: ApiClient, creds: dict[str, dict[str, str]], credential: str
) -> None:
    unauthorised_successes: list[str] = []
    for (method, path), least in sorted(LEAST_ROLE.items()):
        if (method, path) not in app_routes_cache():
            continue
        body = {"json": {"not_a_field": 1}} if method in ("POST", "PUT") else {}
        r = secured.request(method, _url(path), headers=creds[credential], **body)
        where = f"{method} {path} as {credential}: {r.status_code} {r.text[:200]}"
        assert r.status_code < 500, where
        if least == OPEN:
            assert r.status_code not in (401, 403), where
            continue
        if credential in ("none", "bad", "revoked"):
            if r.status_code != 401:
                unauthorised_successes.append(where)
            else:
                assert r.headers["www-authenticate"] == "Bearer", where
                err = r.json()["error"]
                assert err["field"] == "Authorization" and err["remedy"], where
        elif ROLE_RANK[credential] < ROLE_RANK[least]:
            if r.status_code != 403:
                unauthorised_successes.append(where)
            else:
                assert f"'{least}'" in r.json()["error"]["message"], where
        else:
            assert r.status_code not in (401, 403), where
    assert unauthorised_successes == []


_ROUTES: set[tuple[str, str]] = set()


def app_routes_cache() -> set[tuple[str, str]]:
    if not _ROUTES:
        _ROUTES.update(app_routes())
    return _ROUTES


def test_unknown_model_without_a_key_is_401_not_404(secured: ApiClient) -> None:
    # a 404 would tell a stranger which model names exist
    for url in ("/risk-models/secret-model", "/risk-models/secret-model/versions/1"):
        assert secured.get(url).status_code == 401


def test_the_score_route_checks_the_key_before_the_model_name_and_the_model(
    secured: ApiClient, plain_keys: dict[str, str]
) -> None:
    # The hot path (model and champion from memory, no session): still 401 before a 422
    # for a bad name or a 404 for an unknown model; a scorer key reaches those checks.
    body = {"json": {"records": [{"x": 1}]}}
    for name in ("bad%20name!", "secret-model"):
        assert secured.post(f"/risk-models/{name}/scores", **body).status_code == 401
    scorer = {"X-API-Key": plain_keys["scorer"]}
    r = secured.post("/risk-models/bad%20name!/scores", headers=scorer, **body)
    assert r.status_code == 422 and r.json()["error"]["field"] == "model"
    r = secured.post("/risk-models/secret-model/scores", headers=scorer, **body)
    assert r.status_code == 404


def test_x_api_key_header_works_and_a_malformed_authorization_is_401(
    secured: ApiClient, plain_keys: dict[str, str]
) -> None:
    assert (
        secured.get("/risk-models", headers={"X-API-Key": plain_keys["scorer"]}).status_code == 200
    )
    r = secured.get("/risk-models", headers={"Authorization": f"Basic {plain_keys['admin']}"})
    assert r.status_code == 401 and r.json()["error"]["field"] == "Authorization"
    assert plain_keys["admin"] not in r.text
