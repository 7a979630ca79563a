"""The score log: a row for every returned score_id right after the answer; client keys."""

from __future__ import annotations

from sqlalchemy import select

from models_store.orm import Score
from tests.api._data import NEW_RECORDS, fit_body
from tests.api.conftest import ApiClient, row_count, store_dump

SCORE = "/risk-models/water-mains/scores"


def _stored(api: ApiClient) -> dict[str, Score]:
    with api.app.state.session_factory() as s:
        return {r.id: r for r in s.scalars(select(Score))}


def test_every_returned_score_id_is_logged(api: ApiClient) -> None:
    api.post("/risk-models/water-mains/versions", json=fit_body())
    records = [{**r, "key": f"seg-{i}"} for i, r in enumerate(NEW_RECORDS * 50)]
    out = api.post(SCORE, json={"records": records}).json()
    stored = _stored(api)
    assert len(stored) == len(records) == out["n_records"]
    for s in out["scores"]:
        row = stored[s["score_id"]]
        assert row.key == s["key"] and row.version_number == 1
        assert row.probability == s["probability"] and row.eta == s["eta"]
        assert row.se_eta == s["se_eta"]
    assert stored[out["scores"][0]["score_id"]].inputs == NEW_RECORDS[0]


def test_duplicate_keys_refuse_the_whole_batch(api: ApiClient) -> None:
    api.post("/risk-models/water-mains/versions", json=fit_body())
    recs = [
        {**NEW_RECORDS[0], "key": "a"},
        {**NEW_RECORDS[1], "key": "b"},
        {**NEW_RECORDS[2], "key": "a"},
    ]
    before = store_dump(api)
    r = api.post(SCORE, json={"records": recs})
    assert r.status_code == 409
    err = r.json()["error"]
    assert err["code"] == "duplicate_key" and err["details"]["keys"] == ["a"]
    assert err["field"] == "records[0].key" and err["remedy"]
    assert store_dump(api) == before
    # A key already logged by an earlier request is refused too, and nothing is written.
    assert api.post(SCORE, json={"records": recs[:2]}).status_code == 200
    before = store_dump(api)
    r = api.post(SCORE, json={"records": [{**NEW_RECORDS[3], "key": "c"}, recs[1]]})
    assert r.status_code == 409 and r.json()["error"]["details"]["keys"] == ["b"]
    assert store_dump(api) == before
    assert row_count(api, "score") == 2
