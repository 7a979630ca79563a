"""Firth's penalised likelihood against direct maximisation with scipy.optimize."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.optimize import brentq, minimize
from scipy.stats import chi2

from service.stats.blocks import array_blocks
from service.stats.fit import fit_logistic
from service.stats.inference import global_lr_test, profile_intervals


def _separated(seed: int, n: int = 40) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    z = rng.normal(size=n)
    y = (x + 0.3 * z > 0).astype(float)  # complete separation by a combination of x and z
    return np.column_stack([np.ones(n), x, z]), y


def _penalised(X: np.ndarray, y: np.ndarray, w: np.ndarray | None = None):  # type: ignore[no-untyped-def]
    # Jeffreys-penalised log-likelihood l(b) + 1/2 log det(X'WX) (Firth 1993), written out
    # directly so that scipy.optimize is an independent solver.
    w = np.ones(len(y)) if w is None else w

    def neg(b: np.ndarray) -> float:
        eta = X @ b
        mu = 1 / (1 + np.exp(-eta))
        info = X.T @ (X * (w * mu * (1 - mu))[:, None])
        return float(-(w @ (y * eta - np.logaddexp(0, eta))) - 0.5 * np.linalg.slogdet(info)[1])

    return neg


def _argmin(f, x0: np.ndarray) -> np.ndarray:  # type: ignore[no-untyped-def]
    res = minimize(
        f, x0, method="Nelder-Mead", options={"xatol": 1e-11, "fatol": 1e-14, "maxiter": 20000}
    )
    res = minimize(
        f, res.x, method="Nelder-Mead", options={"xatol": 1e-11, "fatol": 1e-14, "maxiter": 20000}
    )
    return np.asarray(res.x)


@pytest.mark.parametrize("weighted", [False, True])
def test_firth_estimate_matches_direct_maximisation(weighted: bool) -> None:
    X, y = _separated(3)
    w = np.random.default_rng(4).integers(1, 3, len(y)).astype(float) if weighted else None
    fit = fit_logistic(X, y, weights=w, method="firth")
    ref = _argmin(_penalised(X, y, w), np.zeros(3))
    assert fit.converged
    np.testing.assert_allclose(fit.coef, ref, atol=1e-6)
    assert fit.penalized_loglik == pytest.approx(-_penalised(X, y, w)(ref), abs=1e-9)
    assert np.isfinite(fit.std_error).all()


def test_firth_profile_interval_matches_direct_constrained_maximisation() -> None:
    # Penalised profile (Heinze & Schemper 2002): maximise the full-model penalised
    # log-likelihood with b_1 = c by Nelder-Mead; brentq for the chi2_1 crossing.
    X, y = _separated(5)
    fit = fit_logistic(X, y, method="firth")
    table = profile_intervals(array_blocks(X, y), fit)
    neg = _penalised(X, y)
    crit = chi2.ppf(0.95, 1)

    def excess(c: float) -> float:
        rest = _argmin(lambda r: neg(np.array([r[0], c, r[1]])), fit.coef[[0, 2]])
        return 2 * (neg(np.array([rest[0], c, rest[1]])) + fit.penalized_loglik) - crit

    b, se = fit.coef[1], fit.std_error[1]
    lo = brentq(excess, b - 3 * se, b, xtol=1e-10)
    hi = brentq(excess, b, b + 20 * se, xtol=1e-10)
    assert table.rows[1].ci_lower == pytest.approx(lo, abs=1e-6)
    assert table.rows[1].ci_upper == pytest.approx(hi, abs=1e-6)


def test_firth_global_test_uses_penalised_null() -> None:
    X, y = _separated(6, 60)
    fit = fit_logistic(X, y, method="firth")
    # The null model under the FULL model's penalty (Heinze & Schemper 2002, as the drop-term
    # tests): l(b) + 1/2 log det I_full(b) over the intercept, the slopes held at 0. (Until
    # issue 15 this asserted the null model's own penalty, the inconsistency fixed there.)
    neg = _penalised(X, y)
    null = _argmin(lambda r: neg(np.array([r[0], 0.0, 0.0])), np.zeros(1))
    assert fit.null_penalized_loglik == pytest.approx(-neg(np.array([null[0], 0.0, 0.0])), abs=1e-9)
    g = global_lr_test(fit)
    assert g.statistic == pytest.approx(2 * (fit.penalized_loglik - fit.null_penalized_loglik))
    assert g.df == 2 and g.p_value < 1e-3
