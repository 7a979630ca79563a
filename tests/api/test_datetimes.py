"""Every date-time a client sends (``service.schemas.common.Instant``): near year 1 or 9999
with an offset, numbers (Unix times), times without an offset and impossible dates are 422
naming the field, the value and the remedy, on every endpoint that takes one; the OpenAPI
document says they are strings in date-time form. Nothing is stored by a refused request."""

from __future__ import annotations

from collections.abc import Iterator
from datetime import UTC, datetime, timedelta, timezone
from typing import Any

import pytest
from pydantic_core import PydanticCustomError

from service.app import create_app
from service.config import Settings
from service.schemas.common import EARLIEST, LATEST, parse_instant
from tests.api._data import NEW_RECORDS, fit_body
from tests.api.conftest import ApiClient, store_dump
from tests.store.dbfixtures import sqlite_url

MODEL = "water-mains"
# Python's datetime range ends at year 1 and 9999: with an offset, the UTC conversion of these
# overflows (the OverflowError was a 500 before the range check).
EDGES = ("0001-01-01T00:00:00+05:00", "9999-12-31T23:59:59-05:00")


@pytest.fixture(scope="module")
def api(tmp_path_factory: pytest.TempPathFactory) -> Iterator[ApiClient]:
    """One app for the module: every request here is refused, so none changes the store."""
    url = sqlite_url(tmp_path_factory.mktemp("datetimes"))
    client = ApiClient(create_app(Settings(database_url=url, auth_required=False)))
    try:
        r = client.post(f"/risk-models/{MODEL}/versions", json=fit_body())
        assert r.status_code == 201, r.text
        r = client.post(
            f"/risk-models/{MODEL}/scores", json={"records": [{**NEW_RECORDS[0], "key": "k1"}]}
        )
        assert r.status_code == 200, r.text
        yield client
    finally:
        client.close()


def _query(path: str, name: str) -> tuple[str, str, dict[str, Any], str]:
    return ("GET", path, {"params": {name: "{}"}}, name)


QUERIES = [
    _query("/audit-events", "since"),
    _query("/audit-events", "until"),
    _query(f"/risk-models/{MODEL}/calibration", "since"),
    _query(f"/risk-models/{MODEL}/calibration", "until"),
    _query(f"/risk-models/{MODEL}/drift", "since"),
    _query(f"/risk-models/{MODEL}/drift", "until"),
    _query(f"/risk-models/{MODEL}/calibration/reliability.svg", "since"),
    _query(f"/risk-models/{MODEL}/drift/measures.svg", "until"),
]


def _send(api: ApiClient, where: tuple[str, str, dict[str, Any], str], value: Any) -> Any:
    method, path, kwargs, name = where
    if "params" in kwargs:
        return api.request(method, path, params={name: value})
    if name == "observed_at":
        body = {"outcomes": [{"key": "k1", "outcome": 1, "observed_at": value}]}
        return api.post(f"/risk-models/{MODEL}/outcomes", json=body)
    return api.post(f"/risk-models/{MODEL}/refits", json={name: value, "dry_run": True})


BODIES: list[tuple[str, str, dict[str, Any], str]] = [
    ("POST", "outcomes", {}, "observed_at"),
    ("POST", "refits", {}, "since"),
    ("POST", "refits", {}, "until"),
]
WHERE = QUERIES + BODIES


def _assert_refused(api: ApiClient, r: Any, field: str, value: Any) -> None:
    assert r.status_code == 422, r.text
    err = r.json()["error"]
    assert err["field"] is not None and err["field"].endswith(field), err
    assert err["value"] == value, err
    assert err["remedy"], err
    assert "2025-02-11T08:30:00Z" in err["remedy"] or "between" in err["remedy"], err


@pytest.mark.parametrize("value", EDGES)
@pytest.mark.parametrize("where", WHERE, ids=lambda w: f"{w[1]}:{w[3]}")
def test_datetimes_near_the_ends_of_the_calendar_are_422_not_500(
    api: ApiClient, where: tuple[str, str, dict[str, Any], str], value: str
) -> None:
    before = store_dump(api)
    r = _send(api, where, value)
    _assert_refused(api, r, where[3], value)
    assert "1900-01-01" in r.json()["error"]["remedy"]
    assert store_dump(api) == before


@pytest.mark.parametrize("value", [1700000000, 1.7e9, True])
@pytest.mark.parametrize("where", BODIES, ids=lambda w: f"{w[1]}:{w[3]}")
def test_numbers_are_not_taken_for_datetimes_in_bodies(
    api: ApiClient, where: tuple[str, str, dict[str, Any], str], value: Any
) -> None:
    before = store_dump(api)
    r = _send(api, where, value)
    _assert_refused(api, r, where[3], value)
    assert "Unix" in r.json()["error"]["remedy"]
    assert store_dump(api) == before


@pytest.mark.parametrize(
    "value", ["1700000000", "2025-02-11T08:30:00", "2025-02-30T00:00Z", "tomorrow"]
)
@pytest.mark.parametrize("where", QUERIES[:4] + BODIES, ids=lambda w: f"{w[1]}:{w[3]}")
def test_unix_times_naive_times_and_impossible_dates_are_refused(
    api: ApiClient, where: tuple[str, str, dict[str, Any], str], value: str
) -> None:
    r = _send(api, where, value)
    _assert_refused(api, r, where[3], value)


def test_an_offset_is_kept_and_the_range_is_half_open() -> None:
    got = parse_instant("2025-02-11T09:30:00.5+01:00")
    assert got == datetime(2025, 2, 11, 8, 30, 0, 500_000, tzinfo=UTC)
    assert got.utcoffset() == timedelta(hours=1)
    assert parse_instant("1900-01-01T00:00:00Z") == EARLIEST
    # 1900-01-01T00:30+01:00 is 1899-12-31T23:30Z: outside
    with pytest.raises(PydanticCustomError):
        parse_instant("1900-01-01T00:30:00+01:00")
    with pytest.raises(PydanticCustomError):
        parse_instant(LATEST.isoformat())
    just_before = LATEST - timedelta(microseconds=1)
    assert (
        parse_instant(just_before.astimezone(timezone(timedelta(hours=-3))).isoformat())
        == just_before
    )
    with pytest.raises(PydanticCustomError):
        parse_instant(datetime(2025, 1, 1))  # naive, built in Python


def test_the_openapi_document_says_datetimes_are_strings(api: ApiClient) -> None:
    doc = api.get("/openapi.json").json()
    comps = doc["components"]["schemas"]
    observed = comps["OutcomeIn"]["properties"]["observed_at"]["anyOf"]
    assert {"type": "null"} in observed
    instant = next(s for s in observed if s.get("type") == "string")
    assert instant["format"] == "date-time"
    params = doc["paths"]["/audit-events"]["get"]["parameters"]
    since = next(p for p in params if p["name"] == "since")["schema"]["anyOf"]
    assert any(s.get("type") == "string" and s.get("format") == "date-time" for s in since)
    assert not any(s.get("type") in ("integer", "number") for s in since)


def test_a_valid_window_reaches_the_refit(api: ApiClient) -> None:
    # the refit fingerprints its request (model_dump(mode="json")): a checked date-time must
    # serialise as one (a serializer warning here was a 500, found by schemathesis)
    body = {"since": "2020-01-01T00:00:00+05:00", "until": "2030-01-01T00:00:00Z", "dry_run": True}
    r = api.post(f"/risk-models/{MODEL}/refits", json=body)
    assert r.status_code == 422 and r.json()["error"]["code"] == "not_enough_outcomes", r.text


def test_an_offset_whose_plus_became_a_space_gets_a_url_remedy(api: ApiClient) -> None:
    r = api.get("/audit-events?since=2025-02-11T08:30:00+01:00")  # + unencoded: a space
    assert r.status_code == 422
    err = r.json()["error"]
    assert err["field"] == "since" and err["value"] == "2025-02-11T08:30:00 01:00"
    assert "%2B" in err["remedy"]
    ok = api.get("/audit-events?since=2025-02-11T08:30:00%2B01:00")
    assert ok.status_code == 200, ok.text
