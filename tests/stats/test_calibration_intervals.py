"""Every proportion / ratio interval of the calibration report contains its estimate exactly,
at the edges too (0 events, all events), and the Wilson limits equal statsmodels'."""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats
from scipy.special import expit
from statsmodels.stats.proportion import proportion_confint

from service.stats._risk_groups import wilson_interval
from service.stats.calibration import calibration_report, observed_expected, reliability_groups
from service.stats.discrimination import auc_delong

Z95 = float(stats.norm.ppf(0.975))
SIZES = (1, 2, 3, 6, 7, 10, 12, 13, 25, 37, 100, 101, 257, 1000, 4099)


@pytest.mark.parametrize("level", [0.8, 0.95, 0.99])
def test_wilson_equals_statsmodels_for_every_k(level: float) -> None:
    z = float(stats.norm.ppf(0.5 + level / 2))
    for n in SIZES:
        k = np.arange(n + 1, dtype=np.float64)
        lo, hi = wilson_interval(k, np.full(n + 1, float(n)), z)
        # statsmodels.stats.proportion.proportion_confint(method="wilson"); its own edge
        # values carry the same few-ulp rounding (e.g. 7e-18 at k = 0), hence abs=1e-12
        ref_lo, ref_hi = proportion_confint(k, n, alpha=1 - level, method="wilson")
        np.testing.assert_allclose(lo, ref_lo, rtol=0, atol=1e-12)
        np.testing.assert_allclose(hi, ref_hi, rtol=0, atol=1e-12)


def test_wilson_contains_the_estimate_exactly_for_every_k() -> None:
    # Exact comparisons, no tolerance: lower <= k/n <= upper for all k in 0..n, lower is 0
    # exactly at k = 0 and upper is 1 exactly at k = n. (Before the fix, 164 of the sizes
    # n = 1..399 had a limit a few ulps on the wrong side, e.g. n = 3, 6, 7, 10.)
    for n in [*SIZES, *range(1, 400)]:
        k = np.arange(n + 1, dtype=np.float64)
        nn = np.full(n + 1, float(n))
        for z in (1.0, Z95, 2.5758293035489004):
            lo, hi = wilson_interval(k, nn, z)
            phat = k / nn
            assert np.all(lo <= phat) and np.all(phat <= hi), n
            assert np.all((lo >= 0.0) & (hi <= 1.0))
            assert lo[0] == 0.0 and hi[-1] == 1.0, n
            assert np.all(lo[1:] > 0.0) and np.all(hi[:-1] < 1.0)


def test_wilson_with_weighted_non_integer_counts() -> None:
    rng = np.random.default_rng(31)
    n = rng.uniform(0.5, 300.0, 5000)
    k = np.where(
        rng.random(5000) < 0.2, 0.0, np.where(rng.random(5000) < 0.2, n, n * rng.random(5000))
    )
    lo, hi = wilson_interval(k, n, Z95)
    phat = k / n
    assert np.all(lo <= phat) and np.all(phat <= hi)
    assert np.all(lo[k == 0] == 0.0) and np.all(hi[k == n] == 1.0)
    inner = (k > 0) & (k < n)
    ref_lo, ref_hi = proportion_confint(k[inner], n[inner], alpha=0.05, method="wilson")
    np.testing.assert_allclose(lo[inner], ref_lo, rtol=0, atol=1e-12)  # statsmodels
    np.testing.assert_allclose(hi[inner], ref_hi, rtol=0, atol=1e-12)


@pytest.mark.parametrize("prevalence", [0.02, 0.03, 0.038, 0.04])
def test_low_prevalence_groups_have_zero_lower_limit(prevalence: float) -> None:
    # Seeded low-prevalence stream; the low-risk groups have no events.
    rng = np.random.default_rng(int(prevalence * 1000))
    p = expit(rng.normal(np.log(prevalence / (1 - prevalence)) - 1.0, 1.2, 3000))
    y = (rng.random(p.size) < p).astype(float)
    for weights in (None, rng.integers(1, 4, p.size).astype(float)):
        rel = reliability_groups(y, p, weights=weights, groups=20)
        zero = [g for g in rel.groups if g.events == 0]
        assert zero, "the seeded data should have a group without events"
        for g in rel.groups:
            assert g.ci_lower <= g.observed_rate <= g.ci_upper
        assert all(g.ci_lower == 0.0 and g.observed_rate == 0.0 for g in zero)


def test_all_event_group_has_upper_limit_one() -> None:
    rng = np.random.default_rng(5)
    p = np.r_[rng.uniform(0.01, 0.3, 270), np.full(30, 0.999)]
    y = np.r_[(rng.random(270) < p[:270]).astype(float), np.ones(30)]
    rel = reliability_groups(y, p, groups=10)
    top = rel.groups[-1]
    assert top.events == top.sum_weights == 30 and top.observed_rate == 1.0
    assert top.ci_upper == 1.0 and top.ci_lower < 1.0
    # statsmodels proportion_confint(method="wilson") for 30 of 30
    assert top.ci_lower == pytest.approx(proportion_confint(30, 30, method="wilson")[0], abs=1e-12)


def test_observed_expected_at_zero_events_and_containment() -> None:
    p = np.full(50, 0.01)
    oe = observed_expected(np.zeros(50), p)
    assert oe.ratio == 0.0 and oe.ci_lower == 0.0
    # Garwood upper limit for O = 0: -log(0.025) events (scipy.stats.poisson: P(X = 0) = 0.025)
    assert oe.ci_upper * oe.expected == pytest.approx(-np.log(0.025), rel=1e-12)
    rng = np.random.default_rng(8)
    for o in range(0, 40):
        y = np.r_[np.ones(o), np.zeros(200 - o)]
        pp = rng.uniform(0.001, 0.3, 200)
        r = observed_expected(y, pp)
        assert r.ci_lower <= r.ratio <= r.ci_upper


def test_auc_interval_contains_the_estimate() -> None:
    rng = np.random.default_rng(12)
    for n in (6, 20, 200):
        for _ in range(30):
            p = rng.random(n)
            y = np.r_[[1.0, 1.0, 0.0, 0.0], (rng.random(n - 4) < p[4:]).astype(float)]
            a = auc_delong(y, p)
            assert a.ci_lower <= a.auc <= a.ci_upper


def test_report_on_tiny_and_single_group_data_keeps_every_interval_ordered() -> None:
    rng = np.random.default_rng(19)
    cases = [
        (np.r_[np.ones(2), np.zeros(8)], np.linspace(0.05, 0.6, 10)),  # tiny n: 10 records
        (np.r_[np.ones(3), np.zeros(97)], np.full(100, 0.03)),  # one risk group only
        (np.r_[np.zeros(90), np.ones(10)], np.r_[rng.uniform(0.01, 0.1, 90), np.full(10, 0.97)]),
    ]
    for y, p in cases:
        rep = calibration_report(y, p, min_outcomes=10, min_events=2)
        for g in rep.reliability.groups:
            assert g.ci_lower <= g.observed_rate <= g.ci_upper
            assert (g.events > 0 or g.ci_lower == 0.0) and (
                g.events < g.sum_weights or g.ci_upper == 1.0
            )
        oe = rep.observed_expected
        assert oe.ci_lower <= oe.ratio <= oe.ci_upper
        for par in (rep.calibration_in_the_large, rep.calibration_slope):
            if np.isfinite(par.estimate) and np.isfinite(par.std_error):
                assert par.ci_lower <= par.estimate <= par.ci_upper


def test_one_distinct_prediction_gives_the_mean_outcome_as_curve() -> None:
    # Loess at a single distinct x: every record is at distance 0, so the local fit is the
    # (weighted) mean outcome and ICI = |mean(y) - p| (definition of ICI, Austin &
    # Steyerberg 2019). Before the fix the bandwidth was 0 and the fit 0/0 (NaN).
    y = np.r_[np.ones(9), np.zeros(141)]
    rep = calibration_report(y, np.full(150, 0.03), min_outcomes=10, min_events=2)
    assert rep.flexible.ici == pytest.approx(9 / 150 - 0.03, abs=1e-12)
    assert rep.flexible.emax == pytest.approx(9 / 150 - 0.03, abs=1e-12)
