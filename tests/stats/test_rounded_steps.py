"""Rounded Newton steps: single-precision information far from the maximum, the same maximum."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm

from service.stats.blocks import array_blocks
from service.stats.fit import fit_logistic
from service.stats.likelihood import loglik_pass
from service.stats.newton import Objective, State, newton, rounding_safe

N = 150_000  # above the warm-start threshold, so the light scan and the sample start run too


def _data(seed: int, p: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    X = np.column_stack([np.ones(N), rng.standard_normal((N, p - 1))])
    beta = rng.normal(0.0, 0.4, p)
    y = (rng.random(N) < 1.0 / (1.0 + np.exp(-(X @ beta)))).astype(float)
    return X, y


def test_rounded_pass_differs_from_the_exact_one_only_in_the_information() -> None:
    X, y = _data(1, 30)
    coef = np.random.default_rng(2).normal(0.0, 0.1, 30)
    blocks = array_blocks(X, y)
    exact = loglik_pass(blocks, coef)
    rounded = loglik_pass(blocks, coef, rounded=True)
    assert rounded.rounded and not exact.rounded
    assert rounded.loglik == exact.loglik
    np.testing.assert_array_equal(rounded.score, exact.score)
    # Single precision (unit roundoff 6e-8) summed over chunks of 4096 rows: common practice
    # puts the relative error of such a sum near sqrt(4096) * 6e-8 ~ 4e-6 at worst.
    scale = np.sqrt(np.outer(np.diag(exact.info), np.diag(exact.info)))
    rel = np.abs(rounded.info - exact.info) / scale
    assert 0 < rel.max() < 1e-5


def test_fit_with_rounded_steps_matches_statsmodels_and_ends_exact() -> None:
    X, y = _data(3, 40)
    fit = fit_logistic(X, y)
    # statsmodels Logit, Newton in double precision throughout: an independent solver.
    ref = sm.Logit(y, X).fit(method="newton", tol=1e-12, disp=False)
    np.testing.assert_allclose(fit.coef, ref.params, rtol=1e-8, atol=1e-10)
    np.testing.assert_allclose(fit.std_error, ref.bse, rtol=1e-8)
    np.testing.assert_allclose(fit.loglik, ref.llf, rtol=1e-13)
    # The covariance comes from a double-precision pass at the final coefficients.
    exact = loglik_pass(array_blocks(X, y), fit.coef)
    np.testing.assert_allclose(np.linalg.inv(exact.info), fit.cov, rtol=1e-10, atol=1e-14)


class _Counting(Objective):
    """Records which passes are rounded; ``break_rounded`` spoils the rounded information."""

    def __init__(self, *args, break_rounded: bool = False, **kwargs) -> None:  # type: ignore[no-untyped-def]
        super().__init__(*args, **kwargs)
        self.kinds: list[bool] = []
        self.break_rounded = break_rounded

    def evaluate(self, coef: np.ndarray, *, rounded: bool = False) -> State | None:
        self.kinds.append(rounded)
        st = super().evaluate(coef, rounded=rounded)
        if st is not None and rounded and self.break_rounded:
            bad = st.info.copy()
            bad[1, 1] = -abs(bad[1, 1])  # not positive definite
            st = State(st.coef, st.loglik, st.penalized_loglik, st.score, bad, 0, True)
        return st


def _start(X: np.ndarray, y: np.ndarray, obj: Objective) -> State:
    coef = np.zeros(X.shape[1])
    coef[0] = np.log(y.mean() / (1.0 - y.mean()))
    st = obj.evaluate(coef)
    assert st is not None
    return st


@pytest.mark.parametrize("break_rounded", [False, True])
def test_newton_rounds_only_the_large_steps_and_recovers_from_a_bad_rounded_information(
    break_rounded: bool,
) -> None:
    X, y = _data(5, 12)
    mask = np.r_[0.0, np.ones(11)]
    obj = _Counting(array_blocks(X, y), "mle", 0.0, mask, break_rounded=break_rounded)
    res = newton(obj, _start(X, y, obj), np.ones(12, bool), max_iter=50, tol=1e-10, rounded=True)
    assert res.converged and not res.state.rounded
    assert obj.kinds[-1] is False  # the last pass, whose information gives the covariance
    if not break_rounded:
        assert obj.kinds[1] is True  # the first step from the intercept-only start is large
    # statsmodels Logit: the same maximum whichever passes were rounded.
    ref = sm.Logit(y, X).fit(method="newton", tol=1e-12, disp=False)
    np.testing.assert_allclose(res.state.coef, ref.params, rtol=1e-8, atol=1e-10)
    exact = loglik_pass(array_blocks(X, y), res.state.coef)
    np.testing.assert_allclose(res.state.info, exact.info, rtol=1e-12)


def test_rounding_is_refused_for_ill_conditioned_or_badly_scaled_information() -> None:
    X, y = _data(7, 5)
    info = loglik_pass(array_blocks(X, y), np.zeros(5)).info
    assert rounding_safe(info, N)
    # Correlation-scaled condition number 1e5 and more: x4 nearly equal to x3.
    near = X.copy()
    near[:, 4] = X[:, 3] + 1e-3 * X[:, 4]
    near_info = loglik_pass(array_blocks(near, y), np.zeros(5)).info
    assert not rounding_safe(near_info, N)
    # A column of about 1e18 per row would overflow a single-precision square.
    big = X.copy()
    big[:, 2] *= 1e18
    assert not rounding_safe(loglik_pass(array_blocks(big, y), np.zeros(5)).info, N)
    # Where rounding is refused the fit runs exactly as before and still matches statsmodels.
    fit = fit_logistic(near, y)
    # statsmodels 0.15 Logit(newton) stops on the change in the parameters: with x4 ~ x3 that
    # change jitters at ~1e-12 from rounding alone, so 1e-12 is never met (ConvergenceWarning);
    # 1e-10 reaches the same maximum (score ~1e-15).
    ref = sm.Logit(y, near).fit(method="newton", tol=1e-10, disp=False)
    np.testing.assert_allclose(fit.coef, ref.params, rtol=1e-7, atol=1e-8)
    np.testing.assert_allclose(fit.std_error, ref.bse, rtol=1e-7)
