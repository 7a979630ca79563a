"""The calibration models' own Newton-Raphson (service.stats._calibration_fit) against the
general engine (service.stats.fit.fit_logistic) and statsmodels GLM (Binomial family, with an
offset and frequency weights): same estimates and Wald standard errors; separation reported."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy.special import expit, logit

from service.stats._calibration_fit import fit_intercept, fit_slope
from service.stats.fit import fit_logistic


@pytest.mark.parametrize("weighted", [False, True])
def test_equal_to_the_engine_and_statsmodels(weighted: bool) -> None:
    rng = np.random.default_rng(41)
    n = 4000
    lp = logit(np.clip(rng.beta(1.2, 12.0, n), 1e-6, 1 - 1e-6))
    y = (rng.random(n) < expit(0.4 + 0.7 * lp)).astype(np.float64)  # miscalibrated on purpose
    w = rng.integers(1, 4, n).astype(np.float64) if weighted else None
    ones = np.ones((n, 1))
    X = np.column_stack([np.ones(n), lp])
    a = fit_intercept(y, lp, w)
    a_engine = fit_logistic(ones, y, weights=w, offset=lp)
    ab = fit_slope(y, lp, w)
    ab_engine = fit_logistic(X, y, weights=w)
    assert a.converged and ab.converged
    np.testing.assert_allclose(a.coef, a_engine.coef, rtol=0, atol=1e-8)
    np.testing.assert_allclose(a.std_error, a_engine.std_error, rtol=1e-7)
    np.testing.assert_allclose(ab.coef, ab_engine.coef, rtol=0, atol=1e-8)
    np.testing.assert_allclose(ab.std_error, ab_engine.std_error, rtol=1e-7)
    # statsmodels GLM(Binomial) with freq_weights and offset
    glm_a = sm.GLM(y, ones, family=sm.families.Binomial(), offset=lp, freq_weights=w).fit()
    glm_ab = sm.GLM(y, X, family=sm.families.Binomial(), freq_weights=w).fit()
    np.testing.assert_allclose(a.coef, glm_a.params, atol=1e-7)
    np.testing.assert_allclose(a.std_error, glm_a.bse, rtol=1e-5)
    np.testing.assert_allclose(ab.coef, glm_ab.params, atol=1e-7)
    np.testing.assert_allclose(ab.std_error, glm_ab.bse, rtol=1e-5)


def test_far_start_is_guarded_and_separation_is_reported() -> None:
    rng = np.random.default_rng(43)
    lp = rng.normal(-1.0, 1.5, 3000)
    y = (rng.random(3000) < expit(2.5 - 0.3 * lp)).astype(np.float64)  # far from (0, 1)
    far = fit_slope(y, lp, None)
    ref = fit_logistic(np.column_stack([np.ones(3000), lp]), y)
    assert far.converged
    np.testing.assert_allclose(far.coef, ref.coef, atol=1e-8)
    separated = fit_slope(np.r_[np.zeros(50), np.ones(50)], np.r_[np.zeros(50), np.ones(50)], None)
    assert not separated.converged and np.isnan(separated.coef).all()
    all_zero = fit_intercept(np.zeros(20), np.zeros(20), None)
    assert not all_zero.converged
