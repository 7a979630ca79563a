"""Cold start of monitoring: CUSUM limits kept in the store and reused after a restart, and
the start-up warming of the outcome snapshot and limits (``/readyz`` does not wait for it)."""

from __future__ import annotations

from pathlib import Path
from typing import Any

import numpy as np
from sqlalchemy import select

from models_store.orm import CusumLimitRecord
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
        body = api.get(DRIFT).json()
        assert body["cusum"]["status"] == "ok"
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
