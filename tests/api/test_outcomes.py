"""POST /risk-models/{model}/outcomes: idempotency, conflicts, unknown scores, bad input,
and a hypothesis property test over interleavings of duplicates and conflicts."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import pytest
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st
from sqlalchemy import text

from tests.api.conftest import ApiClient, row_count
from tests.dashboard._fill import MODEL, fitted_api, score

URL = f"/risk-models/{MODEL}/outcomes"


@pytest.fixture
def api(tmp_path: Path) -> Iterator[ApiClient]:
    with fitted_api(tmp_path) as client:
        yield client


def test_same_outcome_twice_is_counted_once(api: ApiClient) -> None:
    s = score(api, 3, seed=1)
    batch = {"outcomes": [{"score_id": i, "outcome": 1} for i in s.ids]}
    first = api.post(URL, json=batch)
    assert first.status_code == 200 and first.json()["counts"]["accepted"] == 3
    again = api.post(URL, json=batch)
    assert again.status_code == 200
    assert again.json()["counts"] == {"accepted": 0, "duplicates": 3, "conflicts": 0, "unknown": 0}
    assert [d["stored_outcome"] for d in again.json()["duplicates"]] == [1, 1, 1]
    assert row_count(api, "outcome") == 3


def test_conflicts_and_unknown_are_refused_and_listed_the_rest_stored(api: ApiClient) -> None:
    s = score(api, 3, seed=2)
    assert (
        api.post(URL, json={"outcomes": [{"score_id": s.ids[0], "outcome": 0}]}).status_code == 200
    )
    r = api.post(
        URL,
        json={
            "outcomes": [
                {"score_id": s.ids[0], "outcome": 1},  # conflicts with the stored 0
                {"key": s.keys[1], "outcome": 1},  # by the record's key
                {"score_id": "no-such-score", "outcome": 0},
            ]
        },
    )
    assert r.status_code == 207, r.text
    b = r.json()
    assert b["counts"] == {"accepted": 1, "duplicates": 0, "conflicts": 1, "unknown": 1}
    assert b["conflicts"][0]["index"] == 0 and b["conflicts"][0]["stored_outcome"] == 0
    assert b["accepted"][0]["score_id"] == s.ids[1]
    assert b["unknown"][0]["score_id"] == "no-such-score"
    assert row_count(api, "outcome") == 2  # the conflict did not overwrite anything


def test_all_conflicting_is_409_and_all_unknown_is_404(api: ApiClient) -> None:
    s = score(api, 1, seed=3)
    api.post(URL, json={"outcomes": [{"score_id": s.ids[0], "outcome": 1}]})
    r = api.post(URL, json={"outcomes": [{"score_id": s.ids[0], "outcome": 0}]})
    assert r.status_code == 409
    assert r.json()["error"]["code"] == "outcome_conflict"
    assert r.json()["error"]["field"] == "outcomes[0].outcome"
    r = api.post(URL, json={"outcomes": [{"key": "never-scored", "outcome": 0}]})
    assert r.status_code == 404
    assert r.json()["error"]["value"] == "never-scored" and r.json()["counts"]["unknown"] == 1


@pytest.mark.parametrize(
    ("item", "field"),
    [
        ({"score_id": "x", "outcome": 2}, "outcomes[0].outcome"),
        ({"score_id": "x", "outcome": True}, "outcomes[0].outcome"),
        ({"score_id": "x", "outcome": 0.0}, "outcomes[0].outcome"),
        ({"outcome": 1}, "outcomes[0]"),
        (
            {"score_id": "x", "outcome": 1, "observed_at": "2025-01-01T00:00:00"},
            "outcomes[0].observed_at",
        ),
        ({"score_id": "x", "outcome": 1, "extra": 1}, "outcomes[0].extra"),
    ],
)
def test_bad_items_are_422_naming_the_field_and_store_nothing(
    api: ApiClient, item: dict[str, object], field: str
) -> None:
    r = api.post(URL, json={"outcomes": [item]})
    assert r.status_code == 422, r.text
    err = r.json()["error"]
    assert err["field"] == field and err["remedy"]
    assert row_count(api, "outcome") == 0


def test_unknown_model_is_404(api: ApiClient) -> None:
    r = api.post("/risk-models/nope/outcomes", json={"outcomes": [{"key": "a", "outcome": 1}]})
    assert r.status_code == 404 and r.json()["error"]["field"] == "model"


# Property (hypothesis): whatever the interleaving of repeats and contradictions across
# batches, every score ends with exactly one stored outcome, equal to the first one sent.
_events = st.lists(
    st.tuples(st.integers(0, 3), st.integers(0, 1)), min_size=1, max_size=12
).flatmap(lambda ev: st.tuples(st.just(ev), st.lists(st.integers(1, 4), min_size=1, max_size=4)))


@settings(
    max_examples=25, deadline=None, suppress_health_check=[HealthCheck.function_scoped_fixture]
)
@given(case=_events)
def test_any_interleaving_leaves_exactly_one_outcome_per_score(
    api: ApiClient, case: tuple[list[tuple[int, int]], list[int]]
) -> None:
    events, cuts = case
    s = score(api, 4, seed=100, key_prefix=f"h{row_count(api, 'score')}")
    first: dict[int, int] = {}
    for which, y in events:
        first.setdefault(which, y)
    # split the event sequence into consecutive batches at the drawn sizes
    batches, pos = [], 0
    while pos < len(events):
        size = cuts[len(batches) % len(cuts)]
        batches.append(events[pos : pos + size])
        pos += size
    seen: dict[int, int] = {}
    for batch in batches:
        r = api.post(
            URL, json={"outcomes": [{"score_id": s.ids[w], "outcome": y} for w, y in batch]}
        )
        b = r.json()
        assert sum(b["counts"].values()) == len(batch)
        for item in b["accepted"]:
            w = s.ids.index(item["score_id"])
            assert w not in seen
            seen[w] = item["outcome"]
        for item in b["conflicts"]:
            assert item["stored_outcome"] != item["outcome"]
    assert seen == first
    with api.app.state.engine.connect() as conn:
        rows = conn.execute(
            text("SELECT score_id, outcome FROM outcome WHERE score_id IN (:a, :b, :c, :d)"),
            dict(zip("abcd", s.ids, strict=True)),
        ).all()
    stored = {s.ids.index(sid): int(o) for sid, o in rows}
    assert stored == first
