"""The in-memory outcome snapshot equals the store's own columnar read: after incremental
refreshes, under a concurrent ingester, and when rows are missed (the overlap re-read and the
full re-read of the consistency rule in service.monitoring.snapshot)."""

from __future__ import annotations

import threading
from collections.abc import Iterator
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pytest

from models_store.models import require_model
from models_store.scores import ScoreColumns, scores_with_outcomes
from service.monitoring import OutcomeSnapshots
from service.monitoring.snapshot import Snapshot
from tests.api.conftest import ApiClient
from tests.dashboard._fill import (
    MODEL,
    draw_outcomes,
    fitted_api,
    post_outcomes,
    score,
)


@pytest.fixture
def api(tmp_path: Path) -> Iterator[ApiClient]:
    with fitted_api(tmp_path) as client:
        yield client


def _same(a: ScoreColumns, b: ScoreColumns) -> None:
    """Equal as multisets of rows (rows with equal times may come in any order)."""
    assert a.n == b.n

    def rows(c: ScoreColumns) -> np.ndarray:
        t = c.created_at.astype(np.int64)
        keys = (c.probability, c.outcome, c.observed_at.astype(np.int64), c.version, t)
        order = np.lexsort(keys)
        return np.column_stack([np.asarray(k, dtype=np.float64)[order] for k in keys])

    np.testing.assert_array_equal(rows(a), rows(b))


def _check(api: ApiClient, snaps: OutcomeSnapshots, **window: object) -> Snapshot:
    session = api.app.state.session_factory()
    try:
        model = require_model(session=session, name=MODEL)
        snap = snaps.get(session, model)
        _same(snap.columns(**window), scores_with_outcomes(session=session, model=model, **window))  # type: ignore[arg-type]
        return snap
    finally:
        session.close()


def test_snapshot_equals_the_store_after_incremental_refreshes(api: ApiClient) -> None:
    snaps = OutcomeSnapshots()
    s = score(api, 900, seed=201)
    y = draw_outcomes(s.p, seed=202)
    # observed after the scores, not in the future: within the 300 s clock-skew allowance
    t0 = datetime.now(UTC) - timedelta(seconds=250)
    late = [(t0 + timedelta(seconds=i / 4)).isoformat() for i in range(900)]
    post_outcomes(api, s.ids[:600], y[:600], observed_at=late[:600])
    _check(api, snaps)
    post_outcomes(api, s.ids[600:], y[600:], observed_at=late[600:])
    post_outcomes(api, s.ids[:50], y[:50])  # duplicates: nothing new is stored
    since = t0 + timedelta(seconds=54)
    snap = _check(api, snaps, since=since, on="outcome")
    assert snap.n == 900 and np.unique(snap.cols["id"]).size == 900
    _check(api, snaps, version=1, until=datetime.now(UTC))
    assert snaps.full_reads == 1  # the first read; later ones read only new rows


def test_missed_rows_are_found_by_the_overlap_or_a_full_read(api: ApiClient) -> None:
    s = score(api, 400, seed=211)
    post_outcomes(api, s.ids, draw_outcomes(s.p, seed=212))
    snaps = OutcomeSnapshots()
    full = _check(api, snaps)
    model_id = next(iter(snaps._items))
    # as if two transactions with lower ids committed after the last refresh
    gap = np.ones(full.n, dtype=bool)
    gap[[10, 200]] = False
    snaps._items[model_id] = Snapshot({k: v[gap] for k, v in full.cols.items()}, full.received_us)
    _check(api, snaps)
    assert snaps.full_reads == 1  # the overlap re-read found them, deduplicated by id
    # a transaction slower than the overlap: only a full read finds it
    snaps.overlap = timedelta(0)
    old = {k: v[gap] for k, v in full.cols.items()}
    # the held rows look newer than the gap (a later receipt time held)
    snaps._items[model_id] = Snapshot(old, full.received_us + 10**9)
    assert _check(api, snaps).n == 400 and snaps.full_reads == 2


def test_snapshot_under_a_concurrent_ingester(api: ApiClient) -> None:
    s = score(api, 3000, seed=221)
    y = draw_outcomes(s.p, seed=222)
    snaps = OutcomeSnapshots()
    done = threading.Event()
    errors: list[BaseException] = []

    def ingest() -> None:
        try:
            for a in range(0, 3000, 250):  # one request per 250 outcomes, repeats included
                post_outcomes(api, s.ids[max(0, a - 20) : a + 250], y[max(0, a - 20) : a + 250])
        except BaseException as exc:  # pragma: no cover - reported below
            errors.append(exc)
        finally:
            done.set()

    sizes = []
    worker = threading.Thread(target=ingest)
    worker.start()
    session = api.app.state.session_factory()
    try:
        model = require_model(session=session, name=MODEL)
        while not done.is_set():
            snap = snaps.get(session, model)
            assert np.unique(snap.cols["id"]).size == snap.n  # never a row twice
            sizes.append(snap.n)
            session.rollback()  # a fresh read transaction each time
    finally:
        session.close()
    worker.join()
    assert errors == []
    assert sizes == sorted(sizes)  # a later answer never holds fewer outcomes
    assert _check(api, snaps).n == 3000
