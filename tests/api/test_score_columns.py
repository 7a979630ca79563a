"""Scoring by columns, bulk score ids and the score log's group commit."""

from __future__ import annotations

import threading
import time
import uuid
from datetime import UTC, datetime
from typing import Any

import pytest
from sqlalchemy import select

from models_store.models import require_model
from models_store.orm import Score
from service.errors import DuplicateKeyError
from service.score_writer import ScoreLogWriter, ScoreRows
from service.scoring import new_score_ids
from tests.api._data import NEW_RECORDS, fit_body
from tests.api.conftest import ApiClient, row_count

SCORE = "/risk-models/water-mains/scores"


def _columns(records: list[dict[str, Any]]) -> dict[str, list[Any]]:
    return {name: [r[name] for r in records] for name in records[0]}


def test_columns_layout_equals_records_layout(api: ApiClient) -> None:
    assert api.post("/risk-models/water-mains/versions", json=fit_body()).status_code == 201
    by_rows = api.post(SCORE, json={"records": NEW_RECORDS}).json()["scores"]
    cols = {**_columns(NEW_RECORDS), "key": [f"k{i}" for i in range(len(NEW_RECORDS))]}
    r = api.post(SCORE, json={"columns": cols, "explain": True})
    assert r.status_code == 200, r.text
    by_cols = r.json()["scores"]
    for a, b in zip(by_rows, by_cols, strict=True):
        for field in ("probability", "ci_lower", "ci_upper", "eta", "se_eta"):
            assert a[field] == b[field]
    assert [s["key"] for s in by_cols] == cols["key"]
    assert row_count(api, "score") == 2 * len(NEW_RECORDS)
    with api.app.state.session_factory() as s:
        stored = {row.id: row for row in s.scalars(select(Score))}
    first = stored[by_cols[0]["score_id"]]
    assert first.key == "k0" and first.inputs == NEW_RECORDS[0]


def test_layouts_are_exclusive_and_columns_aligned(api: ApiClient) -> None:
    api.post("/risk-models/water-mains/versions", json=fit_body())
    cols = _columns(NEW_RECORDS)
    both = api.post(SCORE, json={"records": NEW_RECORDS, "columns": cols})
    assert both.status_code == 422 and both.json()["error"]["code"] == "invalid_request"
    assert api.post(SCORE, json={"explain": True}).status_code == 422
    short = {**cols, "age_years": cols["age_years"][:-1]}
    r = api.post(SCORE, json={"columns": short})
    assert r.status_code == 422 and r.json()["error"]["field"] == "columns.age_years"
    nested = {**cols, "soil": [["low"]] * len(NEW_RECORDS)}
    r = api.post(SCORE, json={"columns": nested})
    assert r.status_code == 422 and r.json()["error"]["field"] == "columns.soil[0]"
    assert row_count(api, "score") == 0


def test_score_ids_are_version_7_unique_and_ascending() -> None:
    ids = new_score_ids(5000)
    parsed = [uuid.UUID(i) for i in ids]  # stdlib parser: valid RFC 9562 text
    assert all(u.version == 7 and u.variant == uuid.RFC_4122 for u in parsed)
    assert len(set(ids)) == 5000 and ids == sorted(ids)


def _model(api: ApiClient) -> Any:
    with api.app.state.session_factory() as s:
        return require_model(session=s, name="water-mains")


def _rows(model: Any, key: str | None) -> ScoreRows:
    keys = None if key is None else [key]
    return ScoreRows(
        model, 1, new_score_ids(1), keys, ["{}"], [0.1], [0.2], [0.5], datetime.now(UTC)
    )


def test_group_commit_keeps_each_request_apart(api: ApiClient) -> None:
    api.post("/risk-models/water-mains/versions", json=fit_body())
    model = _model(api)
    writer = ScoreLogWriter(api.app.state.session_factory)
    refused: list[str] = []
    written: list[str] = []
    lock = threading.Lock()

    def request(i: int) -> None:
        rows = _rows(model, "shared" if i % 4 == 0 else f"own-{i}")  # 'shared': once only
        try:
            writer.write(rows)
        except DuplicateKeyError:
            with lock:
                refused.append(rows.ids[0])
        else:
            with lock:
                written.append(rows.ids[0])

    threads = [threading.Thread(target=request, args=(i,)) for i in range(32)]
    try:
        for t in threads:
            t.start()
        for t in threads:
            t.join()
    finally:
        writer.close()
    assert len(refused) == 7 and len(written) == 25  # 8 requests share a key; one wins
    with api.app.state.session_factory() as s:
        assert set(s.scalars(select(Score.id))) == set(written)
    assert 1 <= writer.groups <= 25  # every commit carried at least one request


def test_used_key_is_refused_through_the_api(api: ApiClient) -> None:
    api.post("/risk-models/water-mains/versions", json=fit_body())
    body = {"records": [{**NEW_RECORDS[0], "key": "taken"}]}
    assert api.post(SCORE, json=body).status_code == 200
    r = api.post(SCORE, json=body)
    assert r.status_code == 409 and r.json()["error"]["details"]["keys"] == ["taken"]
    assert row_count(api, "score") == 1


@pytest.mark.parametrize("n", [1, 16, 17, 5000])  # the plain-bytes and the numpy paths
def test_score_ids_are_ascending_version_7_uuids(n: int) -> None:
    # Checked with the standard library's uuid module (RFC 9562 layout: version 7, variant
    # 10xx, 48-bit Unix milliseconds first).
    before = time.time_ns() // 1_000_000
    ids = new_score_ids(n)
    after = time.time_ns() // 1_000_000
    assert ids == sorted(ids) and len(set(ids)) == n
    for text in ids:
        u = uuid.UUID(text)
        assert str(u) == text and u.version == 7 and u.variant == uuid.RFC_4122
        assert before <= u.int >> 80 <= after
