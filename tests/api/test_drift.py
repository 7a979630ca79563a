"""GET /risk-models/{model}/drift: windows, CUSUM (shift flagged, reset at a champion change),
PSI on a shifted input stream, and quiet monitoring of a calibrated stream."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import numpy as np
import pytest
from sklearn.metrics import brier_score_loss

from tests.api.conftest import ApiClient
from tests.dashboard._fill import (
    MODEL,
    draw_outcomes,
    fit,
    fitted_api,
    post_outcomes,
    score,
)

URL = f"/risk-models/{MODEL}/drift"


@pytest.fixture
def api(tmp_path: Path) -> Iterator[ApiClient]:
    with fitted_api(tmp_path) as client:
        yield client


def test_count_windows_partition_the_records(api: ApiClient) -> None:
    s = score(api, 2300, seed=61)
    y = draw_outcomes(s.p, seed=62)
    post_outcomes(api, s.ids, y)
    b = api.get(URL, params={"window": "count", "size": 1000}).json()
    items = b["windows"]["items"]
    assert [w["n"] for w in items] == [1000, 1000, 300]
    assert [w["status"] for w in items] == ["ok", "ok", "ok"]
    # scores of one request share a timestamp, so their order inside a window is the store's;
    # the windows still partition the records: their n-weighted Brier scores add up to
    # scikit-learn's brier_score_loss over all of them
    total = sum(w["n"] * w["probability_scores"]["brier"] for w in items) / 2300
    assert total == pytest.approx(brier_score_loss(y, s.p), abs=1e-12)
    assert sum(w["events"] for w in items) == int(y.sum())
    small = api.get(URL, params={"size": 150}).json()["windows"]["items"]
    assert all(w["status"] == "not_enough_outcomes" for w in small if w["events"] < 10)
    assert api.get(URL, params={"window": "weekly"}).json()["error"]["field"] == "window"
    assert api.get(URL, params={"size": 0}).json()["error"]["field"] == "size"


def test_calibrated_stream_raises_no_alert(api: ApiClient) -> None:
    s = score(api, 4000, seed=71)
    post_outcomes(api, s.ids, draw_outcomes(s.p, seed=72))
    b = api.get(URL).json()
    assert b["cusum"]["status"] == "ok"
    window_or_psi = [c for c in b["alerts"]["conditions"] if not c["measure"].startswith("cusum")]
    assert window_or_psi == []
    # CUSUM: the design in-control ARL is 10,000 records per chart, so 4,000 calibrated
    # records give on average <= 0.4 false signals per chart (a Poisson count; P(>= 3) < 1%)
    assert len(b["cusum"]["up"]["signals"]) <= 2 and len(b["cusum"]["down"]["signals"]) <= 2
    assert all(f["band"] == "stable" for f in b["input_drift"]["features"])
    stored = api.get(f"/risk-models/{MODEL}/alerts").json()["items"]
    assert all(a["measure"].startswith("cusum") for a in stored)


def test_cusum_flags_a_half_logit_intercept_shift(api: ApiClient) -> None:
    s = score(api, 6000, seed=81)
    post_outcomes(api, s.ids, draw_outcomes(s.p, seed=82, logit_shift=0.5))
    b = api.get(URL).json()
    up = b["cusum"]["up"]
    assert up["signals"], "the upward chart should signal under a +0.5 logit shift"
    # bounded detection delay: expected LLR drift per record here is about 0.006-0.01, h about 6;
    # 6000 records leave room for several signals, the first well within 3000
    assert up["first_signal"] < 3000
    assert b["cusum"]["down"]["signals"] == []
    assert any(c["measure"] == "cusum_up" for c in b["alerts"]["conditions"])
    assert up["limit"]["criterion"] == "arl" and up["limit"]["target"] == 10_000


def test_cusum_resets_after_a_champion_change(api: ApiClient) -> None:
    s = score(api, 500, seed=91)
    post_outcomes(api, s.ids, draw_outcomes(s.p, seed=92))
    assert api.get(URL).json()["cusum"]["n"] == 500
    fit(api, seed=8)
    r = api.put(f"/risk-models/{MODEL}/champion", json={"version": 2, "reason": "refit"})
    assert r.status_code == 200, r.text
    c = api.get(URL).json()["cusum"]
    assert c["version"] == 2 and c["n"] == 0 and c["reset_reason"].startswith("became champion")
    s2 = score(api, 300, seed=93)
    post_outcomes(api, s2.ids, draw_outcomes(s2.p, seed=94))
    c = api.get(URL).json()["cusum"]
    assert c["n"] == 300 and c["version"] == 2
    back = api.get(URL, params={"version": 1}).json()["cusum"]
    assert back["version"] == 1 and back["n"] == 500


def test_psi_flags_a_shifted_input_stream(api: ApiClient) -> None:
    s = score(api, 1500, seed=101, age_shift=45.0)
    post_outcomes(api, s.ids, draw_outcomes(s.p, seed=102))
    b = api.get(URL).json()
    feats = {f["feature"]: f for f in b["input_drift"]["features"]}
    assert feats["age_years"]["band"] == "major shift" and feats["age_years"]["psi"] > 0.25
    # inputs from the latest window's first score time on: here every score shares one time
    assert feats["age_years"]["n_obs"] == 1500 == b["input_drift"]["n"]
    assert feats["material"]["band"] == "stable"
    measures = {c["measure"] for c in b["alerts"]["conditions"]}
    assert "psi:age_years" in measures and "psi:material" not in measures


def test_time_windows_are_aligned_days(api: ApiClient) -> None:
    s = score(api, 400, seed=111)
    post_outcomes(api, s.ids, draw_outcomes(s.p, seed=112))
    b = api.get(URL, params={"window": "time", "size": 7}).json()
    (w,) = b["windows"]["items"]
    start, end = np.datetime64(w["start"][:-1]), np.datetime64(w["end"][:-1])
    assert end - start == np.timedelta64(7, "D") and w["n"] == 400
    assert (start.astype("datetime64[D]").astype(np.int64)) % 7 == 0


def test_drift_plots_have_axis_labels(api: ApiClient) -> None:
    s = score(api, 1200, seed=121)
    post_outcomes(api, s.ids, draw_outcomes(s.p, seed=122))
    svg = api.get(f"{URL}/measures.svg")
    assert svg.status_code == 200 and "Observed / expected events" in svg.text
    assert "CUSUM S (log-likelihood ratio)" in svg.text
    psi = api.get(f"{URL}/psi.svg")
    assert "Population stability index (unitless)" in psi.text and "age_years" in psi.text
    assert api.get(f"{URL}/psi.png").content[:4] == b"\x89PNG"
