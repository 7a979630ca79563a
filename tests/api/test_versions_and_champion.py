"""Versions are append-only; champion changes keep their history; rollback works."""

from __future__ import annotations

from tests.api._data import NEW_RECORDS, fit_body, segments
from tests.api.conftest import ApiClient, row_count, store_dump

FIT = "/risk-models/water-mains/versions"
CHAMPION = "/risk-models/water-mains/champion"


def test_versions_cannot_be_overwritten(api: ApiClient) -> None:
    v1 = api.post(FIT, json=fit_body(segments(700, seed=1))).json()
    v2 = api.post(FIT, json=fit_body(segments(700, seed=2), note="year two")).json()
    assert (v1["number"], v2["number"]) == (1, 2)
    assert v2["is_champion"] is False  # only the first version is promoted automatically
    assert api.get(f"{FIT}/1").json() == {**v1, "is_champion": True}
    assert v1["data_fingerprint"] != v2["data_fingerprint"]
    before = store_dump(api)
    for method in ("PUT", "PATCH", "DELETE"):
        r = api.request(method, f"{FIT}/1", json=fit_body())
        assert r.status_code == 405, r.text
        assert r.json()["error"]["code"] == "method_not_allowed"
    assert store_dump(api) == before
    listing = api.get(FIT).json()
    assert listing["count"] == 2 and [i["number"] for i in listing["items"]] == [1, 2]
    assert listing["items"][1]["note"] == "year two"


def test_champion_history_and_rollback(api: ApiClient) -> None:
    api.post(FIT, json=fit_body(segments(700, seed=1)))
    api.post(FIT, json=fit_body(segments(700, seed=2)))
    c = api.get(CHAMPION).json()
    assert c["version"] == 1 and c["reason"] == "first version"
    r = api.put(CHAMPION, json={"version": 2, "reason": "refitted on year two"})
    assert r.status_code == 200 and r.json()["version"] == 2
    s = api.post("/risk-models/water-mains/scores", json={"records": NEW_RECORDS[:1]}).json()
    assert s["version"] == 2  # the champion change takes effect at once (cache by number)
    r = api.put(CHAMPION, json={"version": 1, "reason": "rollback: v2 misbehaves"})
    hist = r.json()["history"]
    assert [h["version"] for h in hist] == [1, 2, 1]  # newest first
    assert [h["previous_version"] for h in hist] == [2, 1, None]
    assert hist[0]["reason"] == "rollback: v2 misbehaves"
    assert all(h["changed_at"].endswith("Z") for h in hist)
    assert api.get("/risk-models/water-mains").json()["champion_version"] == 1
    pinned = api.post(
        "/risk-models/water-mains/scores", json={"records": NEW_RECORDS[:1], "version": 2}
    ).json()
    assert pinned["version"] == 2
    assert row_count(api, "champion_change") == 3


def test_model_list(api: ApiClient) -> None:
    assert api.get("/risk-models").json() == {"items": [], "count": 0}
    api.post("/risk-models/b-model/versions", json=fit_body(segments(500), description="B"))
    api.post("/risk-models/a-model/versions", json=fit_body(segments(500)))
    items = api.get("/risk-models").json()["items"]
    assert [m["name"] for m in items] == ["a-model", "b-model"]
    assert items[1]["description"] == "B" and items[1]["n_versions"] == 1
