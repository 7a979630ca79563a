"""Term tables, profile-likelihood intervals and LR tests against independent computations."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy.optimize import brentq
from scipy.stats import chi2
from sklearn.metrics import roc_auc_score

from service.errors import SpecError
from service.stats.blocks import array_blocks
from service.stats.fit import fit_logistic
from service.stats.inference import (
    drop_term_tests,
    fit_statistics,
    global_lr_test,
    profile_intervals,
    term_table,
)


def test_wald_table_matches_statsmodels(mixed_data: tuple[np.ndarray, np.ndarray]) -> None:
    # Reference: statsmodels Logit results: bse, tvalues, pvalues, conf_int(alpha).
    X, y = mixed_data
    fit = fit_logistic(X, y)
    ref = sm.Logit(y, X).fit(method="newton", tol=1e-14, disp=0)
    table = term_table(fit, confidence_level=0.9)
    assert table.ci_method == "wald" and table.confidence_level == 0.9
    np.testing.assert_allclose([r.z for r in table.rows], ref.tvalues, rtol=1e-8)
    np.testing.assert_allclose([r.p_value for r in table.rows], ref.pvalues, rtol=1e-6)
    ci = ref.conf_int(alpha=0.1)
    np.testing.assert_allclose([r.ci_lower for r in table.rows], ci[:, 0], rtol=1e-8)
    np.testing.assert_allclose(
        [r.odds_ratio_ci_upper for r in table.rows], np.exp(ci[:, 1]), rtol=1e-8
    )


def test_profile_intervals_match_offset_refits_with_brentq(
    numeric_data: tuple[np.ndarray, np.ndarray],
) -> None:
    # Independent computation: for coefficient j fixed at c, refit the other terms with
    # statsmodels GLM(Binomial) using c * x_j as offset; brentq finds where the deviance
    # rises by chi2_{1,0.95} (Venzon & Moolgavkar 1988).
    X, y = numeric_data
    X, y = X[:400], y[:400]
    blocks = array_blocks(X, y, block_rows=128)
    fit = fit_logistic(X, y)
    table = profile_intervals(blocks, fit)
    crit = chi2.ppf(0.95, 1)

    def excess(j: int, c: float) -> float:
        rest = np.delete(X, j, axis=1)
        res = sm.GLM(y, rest, family=sm.families.Binomial(), offset=c * X[:, j]).fit(tol=1e-14)
        return 2 * (fit.loglik - res.llf) - crit

    for j in (0, 1, 4):
        b, se = fit.coef[j], fit.std_error[j]
        lo = brentq(lambda c, j=j: excess(j, c), b - 4 * se, b, xtol=1e-12)
        hi = brentq(lambda c, j=j: excess(j, c), b, b + 4 * se, xtol=1e-12)
        row = table.rows[j]
        assert row.ci_lower == pytest.approx(lo, abs=1e-6)
        assert row.ci_upper == pytest.approx(hi, abs=1e-6)
    assert table.ci_method == "profile-likelihood"


def test_global_and_drop_term_tests_match_statsmodels(
    mixed_data: tuple[np.ndarray, np.ndarray],
) -> None:
    # References: statsmodels Logit llr / llr_pvalue; drop test from a statsmodels refit
    # without the group's columns: 2 (llf_full - llf_reduced), chi2 with len(group) df.
    X, y = mixed_data
    fit = fit_logistic(X, y)
    ref = sm.Logit(y, X).fit(method="newton", tol=1e-14, disp=0)
    g = global_lr_test(fit)
    assert g.df == 4
    assert g.statistic == pytest.approx(ref.llr, rel=1e-7)
    assert g.p_value == pytest.approx(ref.llr_pvalue, rel=1e-6)
    blocks = array_blocks(X, y)
    tests = drop_term_tests(blocks, fit, {"level": [3, 4], "x1": [1]})
    for t, cols in zip(tests, ([3, 4], [1]), strict=True):
        red = sm.Logit(y, np.delete(X, cols, axis=1)).fit(method="newton", tol=1e-14, disp=0)
        assert t.df == len(cols)
        assert t.statistic == pytest.approx(2 * (ref.llf - red.llf), rel=1e-7)
        assert t.p_value == pytest.approx(chi2.sf(2 * (ref.llf - red.llf), len(cols)), rel=1e-6)
    with pytest.raises(SpecError):
        drop_term_tests(blocks, fit, {"bad": [0]})


def test_fit_statistics_use_in_sample_predictions(
    numeric_data: tuple[np.ndarray, np.ndarray],
) -> None:
    # References: sklearn.metrics.roc_auc_score; Brier score as the mean squared error.
    X, y = numeric_data
    fit = fit_logistic(X, y)
    stats = fit_statistics(array_blocks(X, y), fit)
    p = 1 / (1 + np.exp(-X @ fit.coef))
    assert stats.auc == pytest.approx(roc_auc_score(y, p), rel=1e-12)
    assert stats.brier == pytest.approx(np.mean((p - y) ** 2), rel=1e-12)
    assert stats.n_obs == X.shape[0] and stats.deviance == pytest.approx(-2 * fit.loglik)
