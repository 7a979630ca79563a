"""Calibration measures: checks against scikit-learn, statsmodels, scipy and exact invariants."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy import stats
from scipy.special import expit, logit
from sklearn.metrics import brier_score_loss, log_loss, roc_auc_score
from statsmodels.nonparametric.smoothers_lowess import lowess
from statsmodels.stats.proportion import proportion_confint

from service.errors import NotEnoughOutcomesError
from service.stats.calibration import (
    calibration_intercept,
    calibration_report,
    calibration_slope,
    flexible_calibration,
    hosmer_lemeshow,
    observed_expected,
    probability_scores,
    reliability_groups,
    spiegelhalter_z,
)
from service.stats.fit import fit_logistic


def _stream(seed: int, n: int, shift: float = 0.0, scale: float = 1.0):
    """Seeded predictions p and outcomes from logit P(y=1) = shift + scale * logit(p)."""
    rng = np.random.default_rng(seed)
    p = expit(rng.normal(-1.5, 1.0, n))
    y = (rng.random(n) < expit(shift + scale * logit(p))).astype(float)
    return y, p, rng.integers(1, 4, n).astype(float)


def test_brier_scaled_brier_and_log_loss_equal_sklearn() -> None:
    y, p, w = _stream(0, 2000, shift=0.3)
    s = probability_scores(y, p)
    # scikit-learn brier_score_loss / log_loss
    assert s.brier == pytest.approx(brier_score_loss(y, p), abs=1e-12)
    assert s.log_loss == pytest.approx(log_loss(y, p), abs=1e-12)
    # Brier of the constant prediction ybar is the scaling maximum ybar (1 - ybar)
    assert s.brier_max == pytest.approx(brier_score_loss(y, np.full(y.size, y.mean())), abs=1e-12)
    assert s.scaled_brier == pytest.approx(1 - s.brier / s.brier_max, abs=1e-15)
    sw = probability_scores(y, p, weights=w)
    assert sw.brier == pytest.approx(brier_score_loss(y, p, sample_weight=w), abs=1e-12)
    assert sw.log_loss == pytest.approx(log_loss(y, p, sample_weight=w), abs=1e-12)


@pytest.mark.parametrize("weighted", [False, True])
def test_intercept_and_slope_equal_statsmodels_glm(weighted: bool) -> None:
    y, p, w = _stream(1, 3000, shift=0.4, scale=0.8)
    wts = w if weighted else None
    lp = logit(p)
    # statsmodels GLM Binomial: intercept-only with offset logit(p); and on logit(p)
    kw = {"freq_weights": w} if weighted else {}
    g0 = sm.GLM(y, np.ones((y.size, 1)), family=sm.families.Binomial(), offset=lp, **kw).fit()
    g1 = sm.GLM(y, sm.add_constant(lp), family=sm.families.Binomial(), **kw).fit()
    citl = calibration_intercept(y, p, weights=wts)
    slope, recal = calibration_slope(y, p, weights=wts)
    assert citl.estimate == pytest.approx(g0.params[0], abs=1e-6)
    assert citl.std_error == pytest.approx(g0.bse[0], rel=1e-6)
    assert slope.estimate == pytest.approx(g1.params[1], abs=1e-6)
    assert slope.std_error == pytest.approx(g1.bse[1], rel=1e-6)
    assert recal.estimate == pytest.approx(g1.params[0], abs=1e-6)
    lo, hi = g1.conf_int()[1]  # Wald interval
    assert (slope.ci_lower, slope.ci_upper) == pytest.approx((lo, hi), abs=1e-6)


@pytest.mark.parametrize(("a", "b"), [(0.0, 1.0), (0.5, 0.7), (-0.3, 1.6)])
def test_exact_invariant_of_a_recalibrated_well_fitted_model(a: float, b: float) -> None:
    # MLE invariance: a model fitted on these data has calibration slope 1 and intercept 0;
    # replacing its predictions by expit(a + b eta) gives slope 1/b and intercept -a/b.
    rng = np.random.default_rng(2)
    n = 4000
    X = np.column_stack([np.ones(n), rng.normal(size=(n, 3))])
    y = (rng.random(n) < expit(X @ np.array([-1.0, 0.8, -0.5, 0.3]))).astype(float)
    eta = X @ fit_logistic(X, y).coef
    slope, recal = calibration_slope(y, expit(a + b * eta))
    assert slope.estimate == pytest.approx(1 / b, abs=1e-6)
    assert recal.estimate == pytest.approx(-a / b, abs=1e-6)


def test_observed_expected_exact_poisson_limits() -> None:
    y, p, _ = _stream(3, 1500, shift=0.2)
    oe = observed_expected(y, p)
    O, E = y.sum(), p.sum()
    assert oe.ratio == pytest.approx(O / E) and oe.observed == O
    # Garwood limits satisfy P(X >= O | L) = P(X <= O | U) = 0.025 (scipy.stats.poisson)
    assert stats.poisson.sf(O - 1, oe.ci_lower * E) == pytest.approx(0.025, abs=1e-9)
    assert stats.poisson.cdf(O, oe.ci_upper * E) == pytest.approx(0.025, abs=1e-9)


def test_hosmer_lemeshow_direct_computation_and_degrees_of_freedom() -> None:
    y, p, _ = _stream(4, 1000, shift=0.3)
    order = np.argsort(p)
    O = np.array([g.sum() for g in np.array_split(y[order], 10)])  # 10 groups of 100
    E = np.array([g.sum() for g in np.array_split(p[order], 10)])
    direct = np.sum((O - E) ** 2 / (E * (1 - E / 100)))
    ext = hosmer_lemeshow(y, p)
    dev = hosmer_lemeshow(y, p, development=True)
    assert ext.statistic == pytest.approx(direct, rel=1e-12)
    # Hosmer, Lemeshow & Sturdivant (2013) 5.2.2: g - 2 df on development data, g external
    assert (ext.df, dev.df) == (10, 8)
    assert ext.p_value == pytest.approx(stats.chi2.sf(direct, 10), rel=1e-12)
    assert dev.p_value == pytest.approx(stats.chi2.sf(direct, 8), rel=1e-12)


def test_hosmer_lemeshow_keeps_ties_together() -> None:
    rng = np.random.default_rng(5)
    p = np.r_[np.full(450, 0.05), rng.uniform(0.1, 0.6, 550)]
    y = (rng.random(p.size) < p).astype(float)
    hl = hosmer_lemeshow(y, p)
    first = hl.groups[0]
    assert first.n_obs == 450 and first.p_min == first.p_max == 0.05
    assert hl.n_groups < 10 and hl.df == hl.n_groups
    assert sum(g.n_obs for g in hl.groups) == 1000


def test_reliability_groups_wilson_intervals_match_statsmodels() -> None:
    y, p, _ = _stream(6, 800)
    rel = reliability_groups(y, p, groups=5)
    assert len(rel.groups) == 5 and "Wilson" in rel.ci_method
    for g in rel.groups:
        # statsmodels proportion_confint(method="wilson")
        lo, hi = proportion_confint(g.events, g.n_obs, alpha=0.05, method="wilson")
        assert (g.ci_lower, g.ci_upper) == pytest.approx((lo, hi), abs=1e-12)


def test_spiegelhalter_z_is_standard_normal_under_calibration() -> None:
    # Spiegelhalter (1986): under calibration z ~ N(0, 1); seeded replications.
    zs = [spiegelhalter_z(*_stream(100 + k, 500)[:2]).z for k in range(400)]
    assert np.mean(zs) == pytest.approx(0.0, abs=0.15)
    assert np.std(zs) == pytest.approx(1.0, abs=0.1)
    y, p, _ = _stream(7, 2000, shift=0.0, scale=0.5)  # over-confident predictions
    assert spiegelhalter_z(y, p).p_value < 0.01


def test_ici_from_statsmodels_lowess_curve() -> None:
    y, p, _ = _stream(8, 600, shift=0.3)
    flex = flexible_calibration(y, p, degree=1, max_points=1000)
    # ICI = mean |loess(p) - p| (Austin & Steyerberg 2019), curve by statsmodels lowess
    ref = lowess(y, p, frac=0.75, it=0, delta=0.0, return_sorted=False)
    d = np.abs(ref - p)
    assert flex.ici == pytest.approx(d.mean(), abs=1e-10)
    assert flex.e50 == pytest.approx(np.median(d), abs=1e-10)
    assert flex.e90 == pytest.approx(np.quantile(d, 0.9), abs=1e-10)
    assert flex.emax == pytest.approx(d.max(), abs=1e-10)
    assert "degree 1, span 0.75" in flex.smoother and "exact" in flex.smoother


def test_report_counts_and_not_enough_outcomes() -> None:
    y, p, _ = _stream(9, 5000, shift=0.5)
    r = calibration_report(y, p)
    assert (r.n_obs, r.n_events, r.n_non_events) == (5000, y.sum(), 5000 - y.sum())
    assert r.auc.auc == pytest.approx(roc_auc_score(y, p), abs=1e-12)  # scikit-learn
    assert r.calibration_in_the_large.estimate == pytest.approx(0.5, abs=0.12)  # truth 0.5
    assert r.hosmer_lemeshow.df == 10 and not r.development
    assert r.flexible.ici > 0.02 and r.observed_expected.ratio > 1.2
    with pytest.raises(NotEnoughOutcomesError) as exc:
        calibration_report(y[:60], p[:60])
    assert exc.value.details["n"] == 60 and exc.value.details["required"]["n"] == 100
    assert exc.value.details["events"] == y[:60].sum()
    with pytest.raises(NotEnoughOutcomesError):
        calibration_report(np.r_[np.ones(5), np.zeros(500)], np.full(505, 0.1))
