"""Cold start of monitoring: CUSUM limits kept in the store and reused after a restart, the
start-up warming of the outcome snapshot and limits (``/readyz`` does not wait for it), and
snapshots started from the stored column blocks (equal to the store's own read; a block that
misses a row costs a full read and is rebuilt). The block test runs on SQLite and PostgreSQL."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from datetime import timedelta
from pathlib import Path
from typing import Any

import numpy as np
import pytest
from sqlalchemy import select
from sqlalchemy.orm import Session

from models_store.db import make_engine, make_session_factory
from models_store.models import require_model
from models_store.orm import CusumLimitRecord, OutcomeColumnBlock
from models_store.scores import ScoreColumns, scores_with_outcomes
from service.app import create_app
from service.config import Settings
from service.monitoring import OutcomeSnapshots, outcome_blocks
from service.stats.cusum import limit_for_arl
from tests.api.conftest import ApiClient
from tests.dashboard._fill import MODEL, draw_outcomes, fit, make_api, post_outcomes, score

DRIFT = f"/risk-models/{MODEL}/drift"


def _stored(api: ApiClient) -> list[CusumLimitRecord]:
    with api.app.state.session_factory() as session:
        return list(session.scalars(select(CusumLimitRecord).order_by(CusumLimitRecord.id)))


def _limits(body: dict[str, Any]) -> tuple[float, float]:
    return body["cusum"]["up"]["h"], body["cusum"]["down"]["h"]


def _filled(tmp_path: Path, n: int) -> np.ndarray:
    """A fitted model with ``n`` scored, calibrated outcomes; returns their probabilities."""
    api = make_api(tmp_path)
    try:
        fit(api)
        s = score(api, n, seed=211)
        post_outcomes(api, s.ids, draw_outcomes(s.p, seed=212))
        assert api.app.state.monitoring_warm.wait(30)
    finally:
        api.close()
    return s.p


def test_a_restart_reuses_the_stored_limits_and_a_changed_setting_does_not(
    tmp_path: Path,
) -> None:
    _filled(tmp_path, 1200)
    first = make_api(tmp_path, cusum_target_arl=2000.0)
    try:
        assert first.app.state.monitoring_warm.wait(60)
        h_first = _limits(first.get(DRIFT).json())
        cache = first.app.state.cusum_limits
        assert (cache.simulated, cache.loaded) == (2, 0)  # simulated by warming or the request
        rows = _stored(first)
        assert [r.h for r in rows] == list(h_first)
        assert rows[0].depends_on["target_arl"] == 2000.0 and rows[0].depends_on["size_class"] == 1
        assert rows[0].control_limit["n_reference"] == 1200
    finally:
        first.close()
    again = make_api(tmp_path, cusum_target_arl=2000.0)
    try:
        assert again.app.state.monitoring_warm.wait(60)
        assert again.app.state.monitoring_warm.state.models == [MODEL]
        cache = again.app.state.cusum_limits
        assert (cache.simulated, cache.loaded) == (0, 2)  # read back, nothing simulated
        assert _limits(again.get(DRIFT).json()) == h_first
        assert len(_stored(again)) == 2
    finally:
        again.close()
    other = make_api(tmp_path, cusum_target_arl=3000.0)  # another target: another limit
    try:
        assert other.app.state.monitoring_warm.wait(60)
        h_other = _limits(other.get(DRIFT).json())
        assert other.app.state.cusum_limits.simulated == 2
        assert h_other[0] > h_first[0] and h_other[1] > h_first[1]  # longer ARL, higher h
        assert len(_stored(other)) == 4
    finally:
        other.close()


def test_the_stored_limit_is_the_simulation_of_the_segment_reference(tmp_path: Path) -> None:
    # recomputed apart from the store and the cache: limit_for_arl called directly on the
    # probabilities the scoring route returned (one request: the store keeps their order),
    # with the documented simulation settings (50 streams in these tests, 2 x ARL long)
    p = _filled(tmp_path, 1100)
    api = make_api(tmp_path, cusum_target_arl=1500.0)
    try:
        body = api.get(DRIFT).json()  # while the warm-up may simulate the same limits
        assert body["cusum"]["status"] == "ok"
        warmer = api.app.state.monitoring_warm
        assert warmer.wait(60) and warmer.state.error is None  # neither waited on the other
        for side, R in (("up", 2.0), ("down", 0.5)):
            direct = limit_for_arl(
                p, odds_ratio=R, target_arl=1500.0, n_sims=50, max_length=3000, seed=0
            )
            assert body["cusum"][side]["h"] == direct.h  # same reference, seed and streams
    finally:
        api.close()


def test_warming_fills_the_snapshot_before_the_first_request(tmp_path: Path) -> None:
    _filled(tmp_path, 800)
    api = make_api(tmp_path)
    try:
        warmer = api.app.state.monitoring_warm
        assert api.get("/readyz").status_code == 200  # readiness never waits for warming
        assert warmer.wait(60) and warmer.state.error is None
        snaps = api.app.state.outcome_snapshots
        assert snaps.full_reads == 1
        body = api.get(f"/risk-models/{MODEL}/calibration").json()
        assert body["counts"]["n"] == 800
        assert snaps.full_reads == 1  # the request used the warmed columns
    finally:
        api.close()


def _started(settings: Settings) -> ApiClient:
    """A new process's app whose snapshots treat every stored row as settled (overlap 0)."""
    app = create_app(settings)
    app.state.outcome_snapshots = OutcomeSnapshots(overlap=timedelta(0))
    client = ApiClient(app)
    assert app.state.monitoring_warm.wait(60)
    assert app.state.monitoring_warm.state.error is None
    return client


def _equal_to_the_store(api: ApiClient) -> int:
    """The app's snapshot equals the store's own columnar read (as multisets of rows)."""
    with api.app.state.session_factory() as session:
        model = require_model(session=session, name=MODEL)
        snap = api.app.state.outcome_snapshots.get(session, model).columns()
        store = scores_with_outcomes(session=session, model=model)
    key = ("probability", "outcome", "observed_at", "created_at", "version", "eta", "se_eta")

    def rows(c: ScoreColumns) -> np.ndarray:
        cols = [np.asarray(getattr(c, k)).astype(np.float64) for k in key]
        return np.column_stack(cols)[np.lexsort(cols[::-1])]

    np.testing.assert_array_equal(rows(snap), rows(store))
    return snap.n


def _blocks(api: ApiClient) -> list[tuple[int, int, int]]:
    with api.app.state.session_factory() as session:
        stmt = select(OutcomeColumnBlock).order_by(OutcomeColumnBlock.after_id)
        return [(b.after_id, b.last_id, b.n_rows) for b in session.scalars(stmt)]


def test_a_restart_starts_the_snapshot_from_sealed_blocks(
    settings: Settings, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr(outcome_blocks, "SEAL_MIN_ROWS", 1)
    settings = settings.model_copy(update={"cusum_n_sims": 50})
    api = _started(settings)
    try:
        fit(api)
        s = score(api, 900, seed=241)
        post_outcomes(api, s.ids, draw_outcomes(s.p, seed=242))
    finally:
        api.close()
    api = _started(settings)  # full read, then sealed
    try:
        assert api.app.state.outcome_snapshots.full_reads == 1
        (block,) = _blocks(api)
        assert block[0] == 0 and block[2] == 900
    finally:
        api.close()
    api = _started(settings)  # from the block alone
    try:
        snaps = api.app.state.outcome_snapshots
        assert (snaps.block_loads, snaps.full_reads) == (1, 0)
        assert _equal_to_the_store(api) == 900
        more = score(api, 300, seed=243, key_prefix="t")
        post_outcomes(api, more.ids, draw_outcomes(more.p, seed=244))
        assert api.get(f"/risk-models/{MODEL}/calibration").json()["counts"]["n"] == 1200
        assert snaps.full_reads == 0 and _equal_to_the_store(api) == 1200
    finally:
        api.close()
    # as if a transaction committed a low id after the block was written: the block misses it
    with _engine_session(settings) as session:
        row = session.scalars(select(OutcomeColumnBlock)).one()
        cols = outcome_blocks.unpack(row.data, row.n_rows)
        keep = np.arange(row.n_rows) != 17
        row.data = outcome_blocks.pack(cols, np.flatnonzero(keep))
        row.n_rows -= 1
        session.commit()
    api = _started(settings)  # the refresh finds the missed row (overlap re-read or full read)
    try:
        snaps = api.app.state.outcome_snapshots
        assert snaps.block_loads == 1
        assert _equal_to_the_store(api) == 1200
        blocks = _blocks(api)  # the short block was found by the seal's count and rebuilt
        assert blocks[0][0] == 0 and sum(n for _, _, n in blocks) == 1200
    finally:
        api.close()
    api = _started(settings)
    try:
        snaps = api.app.state.outcome_snapshots
        assert (snaps.block_loads, snaps.full_reads) == (1, 0)
        assert _equal_to_the_store(api) == 1200
    finally:
        api.close()


@contextmanager
def _engine_session(settings: Settings) -> Iterator[Session]:
    engine = make_engine(settings.database_url)
    try:
        with make_session_factory(engine)() as session:
            yield session
    finally:
        engine.dispose()
