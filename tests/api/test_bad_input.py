"""Every refused request: the documented 4xx, an error naming field, value and remedy, and
the store exactly as it was before (compared row by row). The cases are in
tests/api/_bad_input_cases.py."""

from __future__ import annotations

from typing import Any

import pytest

from tests.api._bad_input_cases import CASES, FIT, _cols, _separated
from tests.api._data import fit_body
from tests.api.conftest import ApiClient, store_dump


@pytest.mark.parametrize(
    ("method", "url", "kwargs", "status", "code", "field", "value"),
    [pytest.param(*c[1:], id=c[0]) for c in CASES],
)
def test_refused_request_names_the_problem_and_changes_nothing(
    api: ApiClient,
    method: str,
    url: str,
    kwargs: Any,
    status: int,
    code: str,
    field: str | None,
    value: Any,
) -> None:
    assert api.post(FIT, json=fit_body()).status_code == 201  # one model with version 1
    before = store_dump(api)
    r = api.request(method, url, **kwargs)
    assert r.status_code == status, r.text
    err = r.json()["error"]
    assert err["code"] == code, err
    assert err["message"] and err["remedy"], err
    if field is not None:
        assert err["field"] is not None and field in err["field"], err
    if value is not None:
        assert err["value"] == value, err
    assert store_dump(api) == before
    assert api.get("/healthz").status_code == 200  # still serving


def test_separation_error_suggests_firth(api: ApiClient) -> None:
    r = api.post(FIT, json=fit_body(_cols(a=_separated)))
    assert r.status_code == 422
    assert "firth" in r.json()["error"]["remedy"].lower()
    assert (
        api.post(
            FIT, json={**fit_body(_cols(a=_separated)), "options": {"method": "firth"}}
        ).status_code
        == 201
    )


def test_the_score_route_documents_its_model_parameter_like_every_other_route(
    api: ApiClient,
) -> None:
    # Its body is documented by hand (openapi_extra); the {model} parameter must still be
    # the one every route that declares ModelName documents.
    paths = api.get("/openapi.json").json()["paths"]
    declared = paths["/risk-models/{model}"]["get"]["parameters"]
    scores = paths["/risk-models/{model}/scores"]["post"]["parameters"]
    assert scores == [p for p in declared if p["name"] == "model"]
