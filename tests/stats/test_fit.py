"""fit_logistic against statsmodels, published values and the mathematics."""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pytest
import statsmodels.api as sm
from scipy.special import logit

from service.errors import (
    DataError,
    RankDeficientError,
    SeparationError,
    SingleClassError,
    SpecError,
    TooFewObservationsError,
)
from service.stats.blocks import array_blocks
from service.stats.fit import fit_logistic, fit_logistic_blocks
from service.stats.likelihood import loglik_pass

Sim = Callable[..., tuple[np.ndarray, np.ndarray]]

RTOL = 1e-8


def _rel(a: np.ndarray, b: np.ndarray) -> float:
    return float(np.max(np.abs(np.asarray(a) - np.asarray(b)) / np.abs(np.asarray(b))))


@pytest.mark.parametrize("data", ["numeric_data", "mixed_data"])
def test_matches_statsmodels_logit(data: str, request: pytest.FixtureRequest) -> None:
    # Reference: statsmodels.discrete.discrete_model.Logit, Newton with a tight tolerance.
    X, y = request.getfixturevalue(data)
    fit = fit_logistic(X, y)
    ref = sm.Logit(y, X).fit(method="newton", tol=1e-14, maxiter=100, disp=0)
    assert fit.converged and fit.stop_reason == "converged"
    assert _rel(fit.coef, ref.params) < RTOL
    assert _rel(fit.std_error, ref.bse) < RTOL
    assert _rel(fit.cov, ref.cov_params()) < RTOL
    assert fit.loglik == pytest.approx(ref.llf, rel=RTOL)
    assert fit.null_loglik == pytest.approx(ref.llnull, rel=RTOL)
    assert fit.aic == pytest.approx(ref.aic, rel=RTOL)
    assert fit.bic == pytest.approx(ref.bic, rel=RTOL)
    assert fit.mcfadden_r2 == pytest.approx(ref.prsquared, rel=1e-7)
    assert fit.n_obs == X.shape[0] and fit.n_events == y.sum()


def test_weights_and_offset_match_statsmodels_glm(
    mixed_data: tuple[np.ndarray, np.ndarray],
) -> None:
    # Reference: statsmodels GLM(Binomial) with freq_weights and offset, IRLS tol 1e-14.
    X, y = mixed_data
    rng = np.random.default_rng(5)
    w = rng.integers(1, 5, X.shape[0]).astype(float)
    off = 0.4 * rng.normal(size=X.shape[0])
    fit = fit_logistic(X, y, weights=w, offset=off, block_rows=257)
    ref = sm.GLM(y, X, family=sm.families.Binomial(), freq_weights=w, offset=off).fit(tol=1e-14)
    assert _rel(fit.coef, ref.params) < RTOL
    assert _rel(fit.std_error, ref.bse) < RTOL
    assert fit.loglik == pytest.approx(ref.llf, rel=RTOL)
    assert fit.null_loglik == pytest.approx(ref.llnull, rel=1e-7)
    assert fit.deviance == pytest.approx(ref.deviance, rel=RTOL)
    assert fit.sum_weights == pytest.approx(w.sum())


def test_spector_matches_greene_table() -> None:
    # Spector & Mazzeo (1980) data from statsmodels.datasets.spector. Reference values: logit
    # column of Greene, Econometric Analysis (5th ed., Table 21.1), quoted from memory; they agree
    # with the Stata results kept in statsmodels' own discrete-model test results to about 1e-6.
    data = sm.datasets.spector.load_pandas()
    X = np.column_stack([np.ones(len(data.exog)), data.exog[["GPA", "TUCE", "PSI"]].to_numpy()])
    y = data.endog.to_numpy(dtype=float)
    fit = fit_logistic(X, y, term_names=["intercept", "GPA", "TUCE", "PSI"])
    np.testing.assert_allclose(fit.coef, [-13.021, 2.826, 0.095, 2.379], atol=5e-4)
    np.testing.assert_allclose(fit.std_error, [4.931, 1.263, 0.142, 1.065], atol=5e-4)
    assert fit.loglik == pytest.approx(-12.8896, abs=5e-5)


def test_intercept_only_is_logit_of_sample_proportion() -> None:
    # Common practice: the intercept-only MLE is logit(ybar) with SE 1/sqrt(n ybar (1 - ybar)).
    rng = np.random.default_rng(3)
    y = (rng.random(500) < 0.2).astype(float)
    fit = fit_logistic(np.ones((500, 1)), y)
    ybar = y.mean()
    assert fit.coef[0] == pytest.approx(logit(ybar), rel=1e-12)
    assert fit.std_error[0] == pytest.approx(1 / np.sqrt(500 * ybar * (1 - ybar)), rel=1e-10)
    assert fit.loglik == pytest.approx(fit.null_loglik, rel=1e-12)


def test_blocks_give_the_same_fit_as_one_block(numeric_data: tuple[np.ndarray, np.ndarray]) -> None:
    # Common practice: sums over row blocks equal the full sums.
    X, y = numeric_data
    one = fit_logistic(X, y, block_rows=10**6)
    many = fit_logistic_blocks(array_blocks(X, y, block_rows=97), n_terms=X.shape[1])
    np.testing.assert_allclose(many.coef, one.coef, rtol=1e-11)
    np.testing.assert_allclose(many.cov, one.cov, rtol=1e-10)


def test_score_and_information_match_finite_differences(
    numeric_data: tuple[np.ndarray, np.ndarray],
) -> None:
    # Central finite differences of the log-likelihood (step 1e-5) check score and information.
    X, y = numeric_data
    blocks = array_blocks(X, y, block_rows=400)
    b = np.array([-0.5, 0.3, -0.2, 0.1, 0.05])
    t = loglik_pass(blocks, b)
    h = 1e-5
    eye = np.eye(b.size)
    grad = [
        (loglik_pass(blocks, b + h * e).loglik - loglik_pass(blocks, b - h * e).loglik) / (2 * h)
        for e in eye
    ]
    np.testing.assert_allclose(t.score, grad, rtol=1e-6, atol=1e-6)
    hess = np.array(
        [
            (loglik_pass(blocks, b + h * e).score - loglik_pass(blocks, b - h * e).score) / (2 * h)
            for e in eye
        ]
    )
    np.testing.assert_allclose(-hess, t.info, rtol=1e-6, atol=1e-6)


def test_complete_separation_raises_naming_the_term() -> None:
    # Albert & Anderson (1984): x perfectly orders the outcome -> no MLE.
    rng = np.random.default_rng(7)
    x = rng.normal(size=60)
    z = rng.normal(size=60)
    X = np.column_stack([np.ones(60), z, x])
    y = (x > 0.1).astype(float)
    with pytest.raises(SeparationError) as err:
        fit_logistic(X, y, term_names=["intercept", "z", "x"])
    assert "x" in err.value.details["terms"]
    assert "firth" in (err.value.remedy or "")


def test_quasi_complete_separation_from_an_empty_cell_raises(make_data: Sim) -> None:
    # A categorical level with no events: its estimate diverges to -inf (quasi-complete).
    X, y = make_data(8, 400, np.array([-0.5, 0.4, 0.0, 0.0]), categorical=False)
    level = (np.arange(400) % 10 == 0).astype(float)
    y = np.where(level == 1, 0.0, y)
    X = np.column_stack([X, level])
    with pytest.raises(SeparationError) as err:
        fit_logistic(X, y, term_names=["intercept", "a", "b", "c", "g=rare"])
    assert err.value.details["terms"] == ["g=rare"]


def test_collinear_terms_are_named(make_data: Sim) -> None:
    X, y = make_data(9, 300, np.array([0.1, 0.5, -0.5]))
    X = np.column_stack([X, X[:, 1] - 2 * X[:, 2]])
    with pytest.raises(RankDeficientError) as err:
        fit_logistic(X, y, term_names=["intercept", "a", "b", "a_minus_2b"])
    assert set(err.value.details["terms"]) == {"a", "b", "a_minus_2b"}


def test_single_class_too_few_rows_and_non_finite_data(make_data: Sim) -> None:
    X, y = make_data(10, 50, np.array([0.0, 1.0]))
    with pytest.raises(SingleClassError):
        fit_logistic(X, np.zeros(50))
    with pytest.raises(TooFewObservationsError):
        fit_logistic(X[:2], np.array([0.0, 1.0]))
    X_bad = X.copy()
    X_bad[17, 1] = np.nan
    with pytest.raises(DataError) as err:
        fit_logistic(X_bad, y, term_names=["intercept", "age"])
    assert err.value.field == "X[17, 1]" and "age" in err.value.message
    with pytest.raises(DataError):
        fit_logistic(X, np.where(np.arange(50) == 3, 2.0, y))
    with pytest.raises(SpecError):
        fit_logistic(X, y, method="bayes")  # type: ignore[arg-type]


def test_iteration_cap_is_reported_not_raised(numeric_data: tuple[np.ndarray, np.ndarray]) -> None:
    X, y = numeric_data
    fit = fit_logistic(X, y, max_iter=1)
    assert not fit.converged and fit.iterations == 1
    assert "iteration cap" in fit.stop_reason and fit.warnings


def test_ridge_matches_direct_penalised_optimisation(
    numeric_data: tuple[np.ndarray, np.ndarray],
) -> None:
    # Independent solver: scipy.optimize.minimize (BFGS) on loglik - lam/2 * |beta_{-0}|^2.
    from scipy.optimize import minimize

    X, y = numeric_data
    lam = 25.0
    fit = fit_logistic(X, y, method="ridge", ridge_lambda=lam)

    def neg(b: np.ndarray) -> tuple[float, np.ndarray]:
        eta = X @ b
        mu = 1 / (1 + np.exp(-eta))
        val = -(y @ eta - np.logaddexp(0, eta).sum()) + 0.5 * lam * (b[1:] @ b[1:])
        grad = -(X.T @ (y - mu)) + lam * np.r_[0.0, b[1:]]
        return val, grad

    ref = minimize(neg, np.zeros(X.shape[1]), jac=True, method="BFGS", options={"gtol": 1e-10})
    np.testing.assert_allclose(fit.coef, ref.x, rtol=1e-6, atol=1e-8)
    assert fit.coef[0] != 0 and abs(fit.coef[1]) < abs(fit_logistic(X, y).coef[1])
