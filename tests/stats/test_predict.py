"""predict() against statsmodels GLMResults.get_prediction."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm

from service.errors import DataError, SpecError
from service.stats.fit import fit_logistic
from service.stats.predict import contributions, predict


@pytest.mark.parametrize("level", [0.9, 0.95])
def test_intervals_match_statsmodels_get_prediction(
    mixed_data: tuple[np.ndarray, np.ndarray], level: float
) -> None:
    # Reference: statsmodels GLM(Binomial) .get_prediction(X).conf_int(alpha) (logit-scale
    # interval transformed by expit), summary_frame for the linear predictor SE.
    X, y = mixed_data
    fit = fit_logistic(X, y)
    ref = sm.GLM(y, X, family=sm.families.Binomial()).fit(tol=1e-14)
    new = X[:200] + 0.1
    pred = predict(new, fit.coef, fit.cov, confidence_level=level)
    rp = ref.get_prediction(new)
    np.testing.assert_allclose(pred.probability, rp.predicted_mean, rtol=1e-8)
    ci = rp.conf_int(alpha=1 - level)
    np.testing.assert_allclose(pred.ci_lower, ci[:, 0], rtol=1e-8)
    np.testing.assert_allclose(pred.ci_upper, ci[:, 1], rtol=1e-8)
    lin = ref.get_prediction(new, which="linear")
    np.testing.assert_allclose(pred.se_eta, lin.se, rtol=1e-8)
    assert (pred.ci_lower >= 0).all() and (pred.ci_upper <= 1).all()


def test_offset_contributions_and_errors(numeric_data: tuple[np.ndarray, np.ndarray]) -> None:
    X, y = numeric_data
    fit = fit_logistic(X, y)
    off = np.linspace(-1, 1, X.shape[0])
    pred = predict(X, fit.coef, fit.cov, offset=off)
    np.testing.assert_allclose(pred.eta, X @ fit.coef + off, rtol=1e-12)
    # Common practice: contributions are x_j * beta_j and sum to eta without the offset.
    np.testing.assert_allclose(contributions(X, fit.coef).sum(axis=1), X @ fit.coef, rtol=1e-12)
    with pytest.raises(SpecError):
        predict(X, fit.coef, fit.cov, confidence_level=1.5)
    with pytest.raises(DataError):
        predict(X[:, :2], fit.coef, fit.cov)
