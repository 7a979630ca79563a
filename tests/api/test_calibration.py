"""GET /risk-models/{model}/calibration through the real app, checked against scikit-learn
and statsmodels on the same joined data, plus windows, small windows and bad queries."""

from __future__ import annotations

from collections.abc import Iterator
from datetime import UTC, datetime, timedelta
from pathlib import Path

import numpy as np
import pytest
import statsmodels.api as sm
from scipy.special import logit
from sklearn.metrics import brier_score_loss, log_loss, roc_auc_score

from tests.api.conftest import ApiClient
from tests.dashboard._fill import (
    MODEL,
    draw_outcomes,
    fitted_api,
    post_outcomes,
    score,
)

URL = f"/risk-models/{MODEL}/calibration"


@pytest.fixture
def api(tmp_path: Path) -> Iterator[ApiClient]:
    with fitted_api(tmp_path) as client:
        yield client


def test_measures_equal_sklearn_and_statsmodels(api: ApiClient) -> None:
    s = score(api, 2500, seed=21)
    y = draw_outcomes(s.p, seed=22, logit_shift=0.3)
    post_outcomes(api, s.ids, y)
    r = api.get(URL)
    assert r.status_code == 200, r.text
    b = r.json()
    assert b["status"] == "ok"
    assert b["counts"] == {"n": 2500, "events": int(y.sum()), "non_events": int(2500 - y.sum())}
    m = b["measures"]
    # scikit-learn: sklearn.metrics.brier_score_loss, log_loss, roc_auc_score
    assert m["probability_scores"]["brier"] == pytest.approx(brier_score_loss(y, s.p), abs=1e-12)
    assert m["probability_scores"]["log_loss"] == pytest.approx(log_loss(y, s.p), abs=1e-10)
    assert m["auc"]["auc"] == pytest.approx(roc_auc_score(y, s.p), abs=1e-12)
    # statsmodels GLM(Binomial): intercept with logit(p) as offset; slope on logit(p)
    lp = logit(s.p)
    citl = sm.GLM(y, np.ones((y.size, 1)), family=sm.families.Binomial(), offset=lp).fit(tol=1e-12)
    slope = sm.GLM(y, sm.add_constant(lp), family=sm.families.Binomial()).fit(tol=1e-12)
    c = m["calibration_in_the_large"]
    assert c["estimate"] == pytest.approx(citl.params[0], abs=1e-7)
    assert c["std_error"] == pytest.approx(citl.bse[0], rel=1e-6)
    lo, hi = citl.conf_int(alpha=0.05)[0]
    assert (c["ci_lower"], c["ci_upper"]) == (
        pytest.approx(lo, abs=1e-6),
        pytest.approx(hi, abs=1e-6),
    )
    assert m["calibration_slope"]["estimate"] == pytest.approx(slope.params[1], abs=1e-7)
    assert m["calibration_slope"]["std_error"] == pytest.approx(slope.bse[1], rel=1e-6)
    assert c["confidence_level"] == 0.95 and c["ci_method"]
    # the +0.3 logit shift shows as a positive calibration-in-the-large, interval excluding 0
    assert c["ci_lower"] > 0
    # O/E: observed and expected events are sums over the joined records
    oe = m["observed_expected"]
    assert oe["observed"] == y.sum() and oe["expected"] == pytest.approx(s.p.sum(), rel=1e-12)
    assert m["hosmer_lemeshow"]["df"] == m["hosmer_lemeshow"]["n_groups"]  # external data
    groups = b["reliability"]["groups"]
    assert sum(g["n_obs"] for g in groups) == 2500 and len(b["flexible_curve"]["predicted"]) > 10


def test_windows_on_outcome_time_select_the_records(api: ApiClient) -> None:
    s = score(api, 1200, seed=31)
    y = draw_outcomes(s.p, seed=32)
    # Outcomes are observed after their score and not in the future (each within the 300 s
    # clock-skew allowance): two groups 4 minutes either side of t0, just after scoring.
    t0 = datetime.now(UTC)
    early, late = (t0 - timedelta(seconds=240)).isoformat(), (t0 + timedelta(seconds=240))
    months = [early if i % 3 else late.isoformat() for i in range(1200)]
    post_outcomes(api, s.ids, y, observed_at=months)
    jan = np.array([i % 3 != 0 for i in range(1200)])
    r = api.get(
        URL,
        params={
            "on": "outcome",
            "since": (t0 - timedelta(seconds=250)).isoformat(),
            "until": t0.isoformat(),
        },
    )
    b = r.json()
    assert r.status_code == 200 and b["counts"]["n"] == int(jan.sum())
    # scikit-learn on the January subset
    assert b["measures"]["probability_scores"]["brier"] == pytest.approx(
        brier_score_loss(y[jan], s.p[jan]), abs=1e-12
    )
    later = api.get(URL, params={"on": "outcome", "since": t0.isoformat()}).json()
    assert later["counts"]["n"] == 400
    # score-time windows: every score was made "now", so a window ending in 2000 is empty
    empty = api.get(URL, params={"until": "2000-01-01T00:00:00Z"}).json()
    assert empty["counts"]["n"] == 0 and empty["status"] == "not_enough_outcomes"


def test_small_window_answers_not_enough_outcomes_with_counts(api: ApiClient) -> None:
    s = score(api, 40, seed=41)
    post_outcomes(api, s.ids, draw_outcomes(s.p, seed=42))
    r = api.get(URL)
    assert r.status_code == 200
    b = r.json()
    assert b["status"] == "not_enough_outcomes" and b["counts"]["n"] == 40
    assert b["required"]["n"] == 100 and "measures" not in b
    assert "widen the window" in b["remedy"]


@pytest.mark.parametrize(
    ("params", "status", "field"),
    [
        ({"since": "2025-01-01T00:00:00"}, 422, "since"),
        ({"since": "2025-02-01T00:00:00Z", "until": "2025-01-01T00:00:00Z"}, 422, "until"),
        ({"since": "yesterday"}, 422, "since"),
        ({"on": "sometime"}, 422, "on"),
        ({"version": 9}, 404, "version"),
        ({"version": 0}, 422, "version"),
    ],
)
def test_bad_window_queries_name_the_parameter(
    api: ApiClient, params: dict[str, object], status: int, field: str
) -> None:
    r = api.get(URL, params=params)
    assert r.status_code == status, r.text
    assert r.json()["error"]["field"] == field and r.json()["error"]["remedy"]


def test_reliability_plot_is_svg_and_png(api: ApiClient) -> None:
    s = score(api, 600, seed=51)
    post_outcomes(api, s.ids, draw_outcomes(s.p, seed=52))
    svg = api.get(f"{URL}/reliability.svg")
    assert svg.status_code == 200 and svg.headers["content-type"].startswith("image/svg+xml")
    assert "Predicted risk (%)" in svg.text and "Observed event rate (%)" in svg.text
    png = api.get(f"{URL}/reliability.png")
    assert png.status_code == 200 and png.content[:8] == b"\x89PNG\r\n\x1a\n"
    assert api.get(f"{URL}/reliability.gif").status_code == 422
