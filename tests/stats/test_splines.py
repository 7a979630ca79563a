"""Restricted cubic splines: Harrell's construction, checked against patsy's natural splines."""

from __future__ import annotations

import numpy as np
import patsy
import statsmodels.api as sm

from service.stats.design import design_matrix, learn_encoding
from service.stats.fit import fit_logistic
from service.stats.splines import HARRELL_QUANTILES, knots_at_quantiles, spline_basis


def test_basis_is_linear_beyond_the_outer_knots() -> None:
    # Defining property of a natural (restricted) cubic spline: zero second derivative in
    # both tails (Harrell, Regression Modeling Strategies, sec. 2.4.5).
    knots = (1.0, 2.5, 4.0, 7.0, 9.0)
    for lo, hi in ((-5.0, 1.0), (9.0, 20.0)):
        x = np.linspace(lo, hi, 7)
        second = np.diff(spline_basis(x, knots), 2, axis=0)
        np.testing.assert_allclose(second, 0.0, atol=1e-9)
    x = np.linspace(1.0, 9.0, 101)
    assert np.abs(np.diff(spline_basis(x, knots), 2, axis=0)).max() > 1e-4


def test_same_function_space_as_patsy_natural_cubic_spline() -> None:
    # Reference: patsy's cr() (natural cubic regression spline, Wood 2006) with the same
    # knots spans the same space, so a logistic fit on either basis (statsmodels Logit on
    # patsy's) reaches the same maximum log-likelihood.
    rng = np.random.default_rng(31)
    x = rng.uniform(0, 10, 800)
    y = (rng.random(800) < 1 / (1 + np.exp(-(np.sin(x / 1.5) - 0.3)))).astype(float)
    enc = learn_encoding([{"name": "x", "kind": "spline", "knots": 5}], {"x": x})
    knots = enc.features[0].knots
    np.testing.assert_allclose(knots, np.quantile(x, HARRELL_QUANTILES[5]), rtol=1e-14)
    X = design_matrix(enc, {"x": x}).X
    assert enc.term_names == ("intercept", "x", "x_s1", "x_s2", "x_s3")
    ours = fit_logistic(X, y)
    B = patsy.dmatrix(
        "0 + cr(x, knots=inner, lower_bound=lo, upper_bound=hi)",
        {"x": x, "inner": list(knots[1:-1]), "lo": knots[0], "hi": knots[-1]},
    )
    ref = sm.Logit(y, np.asarray(B)).fit(method="newton", tol=1e-14, disp=0)
    assert abs(ours.loglik - ref.llf) < 1e-8 * abs(ref.llf)


def test_knots_are_distinct_quantiles() -> None:
    x = np.r_[np.zeros(50), np.arange(1.0, 51.0)]
    k = knots_at_quantiles(x, HARRELL_QUANTILES[4])
    assert list(k) == sorted(set(k)) and len(k) == 3  # 5% and 35% quantiles both 0
