"""The subsample start: same maximum as the cold start, fewer passes, refused when it is poor."""

from __future__ import annotations

import numpy as np
import statsmodels.api as sm

from service.stats import warm_start
from service.stats.blocks import array_blocks
from service.stats.fit import fit_logistic, fit_logistic_blocks

N = 300_000  # above WARM_START_MIN_ROWS


def _data(seed: int, rare_rows: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    X = np.column_stack([np.ones(N), rng.standard_normal((N, 4)), np.zeros(N)])
    if rare_rows is not None:
        X[rare_rows, 5] = 1.0
    eta = X @ np.array([-1.2, 0.6, -0.4, 0.3, 0.9, 0.5])
    y = (rng.random(N) < 1.0 / (1.0 + np.exp(-eta))).astype(float)
    return X, y


def _cold(X: np.ndarray, y: np.ndarray, w: np.ndarray | None = None, off: np.ndarray | None = None):  # type: ignore[no-untyped-def]
    return fit_logistic_blocks(array_blocks(X, y, w, off), n_terms=X.shape[1])


def test_warm_start_reaches_the_statsmodels_maximum_in_fewer_steps() -> None:
    X, y = _data(11)
    X = X[:, :5]
    rng = np.random.default_rng(12)
    w, off = rng.integers(1, 4, N).astype(float), rng.normal(0.0, 0.2, N)
    warm = fit_logistic(X, y, weights=w, offset=off)
    cold = _cold(X, y, w, off)
    # statsmodels GLM(Binomial) with freq_weights and offset: an independent IRLS solver.
    ref = sm.GLM(y, X, family=sm.families.Binomial(), freq_weights=w, offset=off).fit(tol=1e-14)
    np.testing.assert_allclose(warm.coef, ref.params, rtol=1e-8, atol=1e-10)
    np.testing.assert_allclose(warm.std_error, ref.bse, rtol=1e-8)
    np.testing.assert_allclose(warm.loglik, ref.llf, rtol=1e-12)
    np.testing.assert_allclose(warm.coef, cold.coef, rtol=1e-9, atol=1e-11)
    assert warm.converged and cold.converged
    assert warm.iterations < cold.iterations


def test_sample_is_every_16th_row_and_small_data_gets_none() -> None:
    X, y = _data(3)
    sample = warm_start.sample_blocks(X, y, None, None)
    assert sample is not None
    (block,) = list(sample())
    np.testing.assert_array_equal(block.X, X[:: warm_start.STRIDE])
    np.testing.assert_array_equal(block.y, y[:: warm_start.STRIDE])
    small = warm_start.WARM_START_MIN_ROWS - 1
    assert warm_start.sample_blocks(X[:small], y[:small], None, None) is None
    wide = N // warm_start.STRIDE // warm_start.SAMPLE_ROWS_PER_TERM + 1  # too few rows per term
    assert warm_start.sample_blocks(np.zeros((N, wide)), y, None, None) is None


def test_rare_column_missing_from_the_sample_falls_back_to_the_cold_start() -> None:
    # 40 rows carry the rare indicator, none of them on the sampled rows (multiples of 16):
    # the sample's design is rank deficient there, so it gives no start, and the fit is the
    # ordinary one.
    rare = np.arange(40) * 16 * 97 + 5
    X, y = _data(21, rare)
    sample = warm_start.sample_blocks(X, y, None, None)
    assert sample is not None
    names = tuple(f"x{j}" for j in range(X.shape[1]))
    assert warm_start.sample_start(sample, names, 0) is None
    fit = fit_logistic(X, y)
    ref = sm.Logit(y, X).fit(method="newton", tol=1e-12, disp=False)  # statsmodels Logit Newton
    np.testing.assert_allclose(fit.coef, ref.params, rtol=1e-8, atol=1e-10)
    np.testing.assert_allclose(fit.std_error, ref.bse, rtol=1e-8)


def test_rare_column_separated_in_the_sample_gives_no_start() -> None:
    # The rare indicator's sampled rows all have y = 0 (quasi-separation in the sample only):
    # the sample fit runs off to a huge coefficient, so it is refused; the full data, where the
    # indicator has events too, still fits to the statsmodels maximum.
    rare = np.r_[np.arange(30) * 16 * 401, np.arange(60) * 16 * 199 + 7]
    X, y = _data(31, rare)
    y[rare[:30]] = 0.0  # sampled rare rows: no events
    y[rare[30:45]] = 1.0  # unsampled rare rows: some events
    sample = warm_start.sample_blocks(X, y, None, None)
    assert sample is not None
    names = tuple(f"x{j}" for j in range(X.shape[1]))
    assert warm_start.sample_start(sample, names, 0) is None
    fit = fit_logistic(X, y)
    ref = sm.Logit(y, X).fit(method="newton", tol=1e-12, disp=False)  # statsmodels Logit Newton
    np.testing.assert_allclose(fit.coef, ref.params, rtol=1e-8, atol=1e-10)
    np.testing.assert_allclose(fit.std_error, ref.bse, rtol=1e-8)
