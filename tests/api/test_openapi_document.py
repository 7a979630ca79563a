"""The served OpenAPI document is valid and describes what is enforced: every reference
resolves (the JSON fit body's ``VersionCreate`` did not), it passes the OpenAPI 3.1 meta-schema
(schemathesis' own check; openapi-spec-validator too when installed), the batch lists' maxItems
is the enforced limit of this app, cross-field rules are stated, and a 405 names in ``Allow``
every method the path serves."""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any

import pytest
import schemathesis

from service.api.openapi_doc import dangling_refs
from service.app import create_app
from service.config import Settings
from tests.api._data import NEW_RECORDS
from tests.api.conftest import ApiClient
from tests.store.dbfixtures import sqlite_url

LIMIT = 321  # a limit no schema default has


@pytest.fixture(scope="module")
def api(tmp_path_factory: pytest.TempPathFactory) -> Iterator[ApiClient]:
    url = sqlite_url(tmp_path_factory.mktemp("openapi"))
    settings = Settings(database_url=url, auth_required=False, max_records_per_request=LIMIT)
    client = ApiClient(create_app(settings))
    try:
        yield client
    finally:
        client.close()


@pytest.fixture(scope="module")
def doc(api: ApiClient) -> dict[str, Any]:
    r = api.get("/openapi.json")
    assert r.status_code == 200
    body: dict[str, Any] = r.json()
    return body


def test_every_reference_resolves(doc: dict[str, Any]) -> None:
    assert dangling_refs(doc) == set()
    fit = doc["paths"]["/risk-models/{model}/versions"]["post"]["requestBody"]["content"]
    ref = fit["application/json"]["schema"]["$ref"]
    name = ref.rsplit("/", 1)[1]
    body = doc["components"]["schemas"][name]
    assert {"features", "outcome", "data"} <= set(body["properties"]) and "data" in body["required"]


def test_dangling_refs_finds_a_missing_target() -> None:
    # the checker itself, on a made-up document (it must be able to fail)
    bad = {"paths": {"/x": {"$ref": "#/components/schemas/Nope"}}, "components": {"schemas": {}}}
    assert dangling_refs(bad) == {"#/components/schemas/Nope"}


def test_the_document_passes_the_openapi_meta_schema(doc: dict[str, Any]) -> None:
    schemathesis.openapi.from_dict(doc).validate()  # raises on an invalid document


def test_the_document_passes_openapi_spec_validator(doc: dict[str, Any]) -> None:
    validator = pytest.importorskip("openapi_spec_validator")  # the test extra; see pyproject
    validator.validate(doc)


def test_batch_limits_in_the_document_are_the_enforced_ones(
    api: ApiClient, doc: dict[str, Any]
) -> None:
    comps = doc["components"]["schemas"]
    outcomes = comps["OutcomeCreate"]["properties"]["outcomes"]
    assert (
        outcomes["maxItems"] == LIMIT
        and "RISKFIT_MAX_RECORDS_PER_REQUEST" in outcomes["description"]
    )
    score = doc["paths"]["/risk-models/{model}/scores"]["post"]["requestBody"]["content"]
    records = [
        s
        for s in score["application/json"]["schema"]["properties"]["records"]["anyOf"]
        if s.get("type") == "array"
    ]
    assert records and records[0]["maxItems"] == LIMIT
    # enforced: one over the limit is refused, naming the list (the model does not exist: the
    # limit is checked first, before any work)
    items = [{"key": f"k{i}", "outcome": 1} for i in range(LIMIT + 1)]
    r = api.post("/risk-models/m/outcomes", json={"outcomes": items})
    assert r.status_code == 422 and r.json()["error"]["field"] == "outcomes", r.text[:300]
    r = api.post("/risk-models/m/scores", json={"records": [NEW_RECORDS[0]] * (LIMIT + 1)})
    assert r.status_code == 422 and r.json()["error"]["field"] == "records", r.text[:300]


def test_cross_field_rules_are_described(doc: dict[str, Any]) -> None:
    comps = doc["components"]["schemas"]
    names_a_score = comps["OutcomeIn"]["anyOf"]
    assert [s["required"] for s in names_a_score] == [["score_id"], ["key"]]
    refit = comps["RefitCreate"]["properties"]
    assert "later than `since`" in refit["until"]["description"]
    assert "low < high" in comps["GateOverrides"]["properties"]["slope_bounds"]["description"]
    assert "slope_low < slope_high" in comps["AlertThresholdsUpdate"]["description"]
    outcomes = doc["paths"]["/risk-models/{model}/outcomes"]["post"]["description"]
    assert "observed_at" in outcomes and "RISKFIT_CLOCK_SKEW_SECONDS" in outcomes


def test_a_store_outage_is_documented_on_every_operation(doc: dict[str, Any]) -> None:
    for path, item in doc["paths"].items():
        for method, op in item.items():
            assert "503" in op["responses"], (method, path)


@pytest.mark.parametrize(
    ("method", "path", "allow"),
    [
        ("PUT", "/risk-models/m/versions", "GET, POST"),
        ("PATCH", "/api-keys", "GET, POST"),
        ("DELETE", "/risk-models/m/champion", "GET, PUT"),
        ("POST", "/audit-events", "GET"),
        ("GET", "/risk-models/m/outcomes", "POST"),
    ],
)
def test_405_lists_every_method_of_the_path(
    api: ApiClient, method: str, path: str, allow: str
) -> None:
    r = api.request(method, path)
    assert r.status_code == 405
    assert r.headers["allow"] == allow
    err = r.json()["error"]
    assert err["field"] == "method" and err["value"] == method and allow in err["remedy"]
