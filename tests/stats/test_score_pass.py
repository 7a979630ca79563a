"""score_pass: k coefficient vectors in one pass equal k separate passes (and statsmodels)."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm

from service.stats import lanes
from service.stats.blocks import array_blocks
from service.stats.likelihood import loglik_pass
from service.stats.score_pass import score_pass


@pytest.mark.parametrize("n_threads", [1, 2])
def test_columns_equal_single_vector_passes(
    n_threads: int, monkeypatch: pytest.MonkeyPatch
) -> None:
    monkeypatch.setattr(lanes, "PARALLEL_MIN_TERMS", 1)
    before = lanes.pass_threads()
    lanes.set_pass_threads(n_threads)
    try:
        rng = np.random.default_rng(41)
        n = 90_001
        X = np.column_stack([np.ones(n), rng.standard_normal((n, 3))])
        y = (rng.random(n) < 0.3).astype(float)
        w, off = rng.random(n) * 2.0, rng.normal(0.0, 0.1, n)
        C = rng.normal(0.0, 0.5, (4, 3))
        C[:, 2] = [40.0, 0.0, 0.0, 0.0]  # fitted probabilities numerically 1: the upper tail
        blocks = array_blocks(X, y, w, off, 32_768)
        ll, S = score_pass(blocks, C)
        for j in range(C.shape[1]):
            one = loglik_pass(blocks, C[:, j], want_info=False)
            np.testing.assert_allclose(ll[j], one.loglik, rtol=1e-13)
            np.testing.assert_allclose(S[:, j], one.score, rtol=1e-11, atol=1e-9)
    finally:
        lanes.set_pass_threads(before)


def test_loglik_and_score_match_statsmodels_glm() -> None:
    # statsmodels GLM(Binomial): loglike(params) and score(params) with freq_weights and offset.
    rng = np.random.default_rng(42)
    n = 5_000
    X = np.column_stack([np.ones(n), rng.standard_normal((n, 2))])
    y = (rng.random(n) < 0.4).astype(float)
    w, off = rng.integers(1, 4, n).astype(float), rng.normal(0.0, 0.2, n)
    C = rng.normal(0.0, 0.4, (3, 2))
    ll, S = score_pass(array_blocks(X, y, w, off), C)
    model = sm.GLM(y, X, family=sm.families.Binomial(), freq_weights=w, offset=off)
    for j in range(2):
        np.testing.assert_allclose(ll[j], model.loglike(C[:, j]), rtol=1e-12)
        np.testing.assert_allclose(S[:, j], model.score(C[:, j]), rtol=1e-9, atol=1e-8)
