"""Columns far from zero: fitted, not refused; true collinearity still refused and named.

References: statsmodels ``Logit`` (Newton). For columns shifted by 1e6 or 1e9 statsmodels'
own Newton on the raw design does not converge (its X'WX holds no digit of the spread), so
the reference is statsmodels on the centred design, mapped back by the exact identity
``b0 = b0' - sum_j c_j b_j`` (``cov = A cov' A'``), common practice for a change of origin.
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm

from service.errors import RankDeficientError
from service.stats.blocks import array_blocks
from service.stats.fit import fit_logistic
from service.stats.inference import drop_term_tests, profile_intervals


def _data(seed: int, n: int = 600) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    Z = rng.normal(size=(n, 3))
    y = (rng.random(n) < 1 / (1 + np.exp(-(-0.4 + Z @ [0.8, -0.5, 0.3])))).astype(float)
    return np.column_stack([np.ones(n), Z]), y


def _statsmodels_shifted(Xc: np.ndarray, y: np.ndarray, shift: np.ndarray):  # type: ignore[no-untyped-def]
    """statsmodels Logit on the centred design ``Xc``, in the columns ``Xc + shift``."""
    ref = sm.Logit(y, Xc).fit(method="newton", tol=1e-12, maxiter=100, disp=False)
    A = np.eye(Xc.shape[1])
    A[0, 1:] = -shift[1:]
    cov = A @ np.asarray(ref.cov_params()) @ A.T
    return A @ ref.params, np.sqrt(np.diag(cov)), float(ref.llf)


@pytest.mark.parametrize("offset", [1e3, 1e6, 1e9])
@pytest.mark.parametrize("method", ["mle", "firth"])
def test_shifted_columns_fit_and_match_statsmodels(offset: float, method: str) -> None:
    Xc, y = _data(31)
    shift = np.array([0.0, offset, 0.0, 2026.0])  # a big shift, and a calendar year
    X = Xc + shift
    Xc = X - shift  # exact (Sterbenz): the values the shifted columns really hold
    fit = fit_logistic(X, y, method=method)  # type: ignore[arg-type]
    assert fit.converged
    ref_fit = fit_logistic(Xc, y, method=method)  # type: ignore[arg-type]
    # the same model: invariant log-likelihood, slopes equal to the centred fit's
    assert fit.loglik == pytest.approx(ref_fit.loglik, rel=1e-12)
    assert fit.penalized_loglik == pytest.approx(ref_fit.penalized_loglik, rel=1e-12)
    if method == "mle":
        b, se, llf = _statsmodels_shifted(Xc, y, shift)  # statsmodels Logit, mapped back
        np.testing.assert_allclose(fit.coef, b, rtol=1e-6)
        np.testing.assert_allclose(fit.std_error, se, rtol=1e-6)
        assert fit.loglik == pytest.approx(llf, rel=1e-10)
    np.testing.assert_allclose(fit.coef[1:], ref_fit.coef[1:], rtol=1e-7)


def test_third_decimal_measurement_matches_statsmodels() -> None:
    # plain ML with a large finite coefficient (~1000) on raw units
    rng = np.random.default_rng(32)
    n = 500
    z = rng.normal(size=n)
    y = (rng.random(n) < 1 / (1 + np.exp(-1.2 * z))).astype(float)
    # 1e-3 z: statsmodels Logit on the raw design converges, the direct reference
    X = np.column_stack([np.ones(n), 1e-3 * z])
    fit = fit_logistic(X, y)
    ref = sm.Logit(y, X).fit(method="newton", tol=1e-12, maxiter=200, disp=False)
    np.testing.assert_allclose(fit.coef, ref.params, rtol=1e-6)
    np.testing.assert_allclose(fit.std_error, ref.bse, rtol=1e-6)
    # 5 + 1e-3 z (a measurement varying in its third decimal): statsmodels' Newton on the raw
    # design stops unconverged, so statsmodels on the centred design, mapped back
    X = np.column_stack([np.ones(n), 5.0 + 1e-3 * z])
    shift = np.array([0.0, 5.0])
    for method in ("mle", "firth"):
        fit = fit_logistic(X, y, method=method)  # type: ignore[arg-type]
        assert fit.converged
        if method == "mle":
            b, se, _ = _statsmodels_shifted(X - shift, y, shift)
            np.testing.assert_allclose(fit.coef, b, rtol=1e-6)
            np.testing.assert_allclose(fit.std_error, se, rtol=1e-6)


def test_true_collinearity_is_refused_and_named() -> None:
    Xc, y = _data(33)
    n = Xc.shape[0]
    names = ["intercept", "a", "b", "c", "d"]
    # d = a + 2 b, also with a shifted by 1e6 (then d carries the shift)
    for shift in (0.0, 1e6):
        X = Xc.copy()
        X[:, 1] += shift
        X = np.column_stack([X, X[:, 1] + 2 * X[:, 2]])
        with pytest.raises(RankDeficientError) as err:
            fit_logistic(X, y, term_names=names)
        assert set(err.value.details["terms"]) >= {"a", "b", "d"}
        assert "c" not in err.value.details["terms"]
    # a full set of dummies with the intercept
    level = np.arange(n) % 3
    X = np.column_stack([Xc[:, :2], *[(level == k).astype(float) for k in range(3)]])
    with pytest.raises(RankDeficientError) as err:
        fit_logistic(X, y, term_names=["intercept", "a", "g=x", "g=y", "g=z"])
    assert set(err.value.details["terms"]) == {"intercept", "g=x", "g=y", "g=z"}
    # a constant column (any value, also one far from zero) duplicates the intercept
    for value in (3.0, 1e6, 0.0):
        X = np.column_stack([Xc[:, :2], np.full(n, value)])
        with pytest.raises(RankDeficientError) as err:
            fit_logistic(X, y, term_names=["intercept", "a", "k"])
        assert set(err.value.details["terms"]) == {"intercept", "k"}


@pytest.mark.parametrize("offset", [1e6, 1e9])
def test_drop_terms_and_slope_profiles_on_shifted_columns(offset: float) -> None:
    Xc, y = _data(34, 500)
    shift = np.array([0.0, offset, 0.0, 2026.0])
    X = Xc + shift
    Xc = X - shift  # exact: the values the shifted columns hold
    fit = fit_logistic(X, y)
    groups = {"a": [1], "b": [2], "c": [3], "a+b": [1, 2]}
    full = sm.Logit(y, Xc).fit(method="newton", tol=1e-12, disp=False)
    for t in drop_term_tests(array_blocks(X, y), fit, groups):
        # statsmodels Logit refit of the reduced (centred) design: the LR statistic is the same
        # for any origin of the columns
        red = sm.Logit(y, np.delete(Xc, groups[t.name], axis=1)).fit(
            method="newton", tol=1e-12, disp=False
        )
        assert t.statistic == pytest.approx(2 * (full.llf - red.llf), rel=1e-7)
    # profile-likelihood limits of the slopes do not depend on the origin either: the same as
    # those of the fit on the centred columns (themselves checked against scipy in
    # tests/stats/test_inference.py). Not at 1e9: there the intercept's own profile (at x = 0,
    # 1e9 away from the data) is ill-posed in double precision (a known limitation).
    if offset > 1e6:
        return
    table = profile_intervals(array_blocks(X, y), fit)
    ref = profile_intervals(array_blocks(Xc, y), fit_logistic(Xc, y))
    for row, r in zip(table.rows[1:], ref.rows[1:], strict=True):
        assert row.ci_lower == pytest.approx(r.ci_lower, rel=1e-7)
        assert row.ci_upper == pytest.approx(r.ci_upper, rel=1e-7)
