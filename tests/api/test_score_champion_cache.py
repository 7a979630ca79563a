"""The scoring path keeps the model and its champion in memory, and is never stale for it.

Two apps on one database stand for two server processes: each has its own caches. After one
of them changes the champion, the other's very next score request must use the new champion
(the score-log commit re-reads it in its write transaction and the request scores again),
its score rows must carry that version, and nothing of the refused attempt may be stored.
"""

from __future__ import annotations

from collections.abc import Iterator

import pytest
from sqlalchemy import select

from models_store.orm import Score
from service.app import create_app
from service.config import Settings
from tests.api._data import NEW_RECORDS, fit_body, segments
from tests.api.conftest import ApiClient, row_count

FIT = "/risk-models/water-mains/versions"
CHAMPION = "/risk-models/water-mains/champion"
SCORES = "/risk-models/water-mains/scores"


@pytest.fixture
def other(settings: Settings) -> Iterator[ApiClient]:
    """A second app (its own caches and writer) on the same database as ``api``."""
    client = ApiClient(create_app(settings))
    try:
        yield client
    finally:
        client.close()


def _versions_logged(api: ApiClient, ids: list[str]) -> set[int]:
    with api.app.state.engine.connect() as conn:
        stmt = select(Score.version_number).where(Score.id.in_(ids))
        return set(conn.execute(stmt).scalars())


def test_a_champion_change_elsewhere_is_served_on_the_next_request(
    api: ApiClient, other: ApiClient
) -> None:
    api.post(FIT, json=fit_body(segments(700, seed=1)))
    api.post(FIT, json=fit_body(segments(700, seed=2)))
    one = {"records": NEW_RECORDS[:2]}
    first = other.post(SCORES, json=one).json()  # other now holds (model, champion 1) in memory
    assert first["version"] == 1
    assert other.app.state.version_cache.model("water-mains")[1] == 1
    for target in (2, 1, 2):
        r = api.put(CHAMPION, json={"version": target, "reason": f"switch to {target}"})
        assert r.status_code == 200, r.text
        before = row_count(other, "score")
        seen = other.post(SCORES, json=one)
        assert seen.status_code == 200, seen.text
        body = seen.json()
        assert body["version"] == target, "served a stale champion"
        ids = [s["score_id"] for s in body["scores"]]
        assert _versions_logged(other, ids) == {target}
        assert row_count(other, "score") == before + 2  # the refused attempt left nothing
        assert other.app.state.version_cache.model("water-mains")[1] == target


def test_a_big_batch_sees_a_champion_change_elsewhere(api: ApiClient, other: ApiClient) -> None:
    """Bodies over the inline size are scored in a thread and, over 1000 rows, committed in a
    transaction of their own: the same champion check applies there."""
    api.post(FIT, json=fit_body(segments(700, seed=1)))
    api.post(FIT, json=fit_body(segments(700, seed=2)))
    cols = segments(1500, seed=5)
    cols.pop("outcome")
    assert other.post(SCORES, json={"columns": cols}).json()["version"] == 1
    api.put(CHAMPION, json={"version": 2, "reason": "year two"})
    body = other.post(SCORES, json={"columns": cols}).json()
    assert body["version"] == 2 and body["n_records"] == 1500
    assert _versions_logged(other, [s["score_id"] for s in body["scores"]]) == {2}
    assert row_count(other, "score") == 3000


def test_an_explicit_version_is_not_checked_against_the_champion(
    api: ApiClient, other: ApiClient
) -> None:
    api.post(FIT, json=fit_body(segments(700, seed=1)))
    api.post(FIT, json=fit_body(segments(700, seed=2)))
    other.post(SCORES, json={"records": NEW_RECORDS[:1]})
    api.put(CHAMPION, json={"version": 2, "reason": "year two"})
    r = other.post(SCORES, json={"records": NEW_RECORDS[:1], "version": 1})
    assert r.status_code == 200 and r.json()["version"] == 1
    assert other.post(SCORES, json={"records": NEW_RECORDS[:1]}).json()["version"] == 2


def test_unknown_model_and_version_still_read_the_store(api: ApiClient, other: ApiClient) -> None:
    assert other.post(SCORES, json={"records": NEW_RECORDS[:1]}).status_code == 404
    api.post(FIT, json=fit_body(segments(700, seed=1)))  # created elsewhere: not negatively cached
    assert other.post(SCORES, json={"records": NEW_RECORDS[:1]}).status_code == 200
    r = other.post(SCORES, json={"records": NEW_RECORDS[:1], "version": 2})
    assert r.status_code == 404 and r.json()["error"]["field"] == "version"
    api.post(FIT, json=fit_body(segments(700, seed=2)))
    r = other.post(SCORES, json={"records": NEW_RECORDS[:1], "version": 2})
    assert r.status_code == 200 and r.json()["version"] == 2
