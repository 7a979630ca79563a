"""Outcomes dated in the future, or before the score they resolve, are refused: the whole batch
is 422 naming ``outcomes[i].observed_at`` (the first such item), its value and the remedy, and
nothing of the batch is stored (the batch semantics of any malformed item). Within the
clock-skew allowance (setting ``clock_skew_seconds``, default 300 s) they are accepted."""

from __future__ import annotations

from collections.abc import Iterator
from datetime import UTC, datetime, timedelta
from pathlib import Path

import pytest

from service.app import create_app
from service.config import Settings
from tests.api._data import NEW_RECORDS, fit_body
from tests.api.conftest import ApiClient, store_dump
from tests.store.dbfixtures import sqlite_url

MODEL = "water-mains"
OUTCOMES = f"/risk-models/{MODEL}/outcomes"


@pytest.fixture
def api(database_url: str) -> Iterator[ApiClient]:
    """SQLite and PostgreSQL (tests/api/conftest.py): the score times come from the store."""
    settings = Settings(database_url=database_url, auth_required=False)
    client = ApiClient(create_app(settings))
    try:
        assert client.post(f"/risk-models/{MODEL}/versions", json=fit_body()).status_code == 201
        records = [{**rec, "key": f"k{i}"} for i, rec in enumerate(NEW_RECORDS)]
        r = client.post(f"/risk-models/{MODEL}/scores", json={"records": records})
        assert r.status_code == 200, r.text
        client.scored_at = datetime.fromisoformat(r.json()["created_at"])  # type: ignore[attr-defined]
        yield client
    finally:
        client.close()


def _iso(t: datetime) -> str:
    return t.isoformat()


@pytest.mark.parametrize(
    ("observed", "words"),
    [
        (lambda now, scored: "2999-01-01T00:00:00Z", "future"),
        (lambda now, scored: _iso(now + timedelta(hours=1)), "future"),
        (lambda now, scored: "2001-01-01T00:00:00Z", "before the score"),
        (lambda now, scored: _iso(scored - timedelta(hours=1)), "before the score"),
    ],
    ids=["year-2999", "an-hour-ahead", "year-2001", "an-hour-before-the-score"],
)
def test_an_impossible_observed_at_refuses_the_whole_batch(
    api: ApiClient, observed: object, words: str
) -> None:
    now = datetime.now(UTC)
    bad = observed(now, api.scored_at)  # type: ignore[operator, attr-defined]
    items = [
        {"key": "k0", "outcome": 1},  # a good item first: it must not be stored either
        {"key": "k1", "outcome": 0, "observed_at": _iso(now)},
        {"key": "k2", "outcome": 1, "observed_at": bad},
    ]
    before = store_dump(api)
    r = api.post(OUTCOMES, json={"outcomes": items})
    assert r.status_code == 422, r.text
    err = r.json()["error"]
    assert err["field"] == "outcomes[2].observed_at", err
    assert datetime.fromisoformat(err["value"]) == datetime.fromisoformat(bad)
    assert words in err["message"] and "nothing was stored" in err["message"]
    assert err["remedy"] and err["details"]["indexes"] == [2]
    assert store_dump(api) == before  # not half-written
    # the same batch without the bad date is accepted whole
    items[2].pop("observed_at")
    again = api.post(OUTCOMES, json={"outcomes": items})
    assert again.status_code == 200 and again.json()["counts"]["accepted"] == 3


def test_clock_skew_within_the_allowance_is_accepted(api: ApiClient) -> None:
    scored = api.scored_at  # type: ignore[attr-defined]
    items = [
        {
            "key": "k0",
            "outcome": 1,
            "observed_at": _iso(datetime.now(UTC) + timedelta(seconds=200)),
        },
        {"key": "k1", "outcome": 0, "observed_at": _iso(scored - timedelta(seconds=200))},
    ]
    r = api.post(OUTCOMES, json={"outcomes": items})
    assert r.status_code == 200, r.text


def test_the_allowance_is_a_setting(tmp_path: Path) -> None:
    settings = Settings(
        database_url=sqlite_url(tmp_path), auth_required=False, clock_skew_seconds=0
    )
    api = ApiClient(create_app(settings))
    try:
        assert api.post(f"/risk-models/{MODEL}/versions", json=fit_body()).status_code == 201
        r = api.post(
            f"/risk-models/{MODEL}/scores", json={"records": [{**NEW_RECORDS[0], "key": "a"}]}
        )
        ahead = _iso(datetime.now(UTC) + timedelta(seconds=60))
        r = api.post(
            OUTCOMES, json={"outcomes": [{"key": "a", "outcome": 1, "observed_at": ahead}]}
        )
        assert r.status_code == 422 and "0 s of clock-skew" in r.json()["error"]["message"]
    finally:
        api.close()
    assert Settings().clock_skew_seconds == 300  # the documented default
