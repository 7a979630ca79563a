"""Loess smoother: checks against statsmodels lowess and a direct per-point polynomial fit."""

from __future__ import annotations

import numpy as np
import pytest
from statsmodels.nonparametric.smoothers_lowess import lowess

from service.errors import SpecError
from service.stats.smoothing import loess


def _binary(seed: int, n: int, decimals: int | None = None) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    x = rng.beta(1.5, 6.0, n)
    if decimals is not None:
        x = np.round(x, decimals)
    y = (rng.random(n) < np.clip(1.3 * x, 0, 1)).astype(float)
    return x, y


@pytest.mark.parametrize("decimals", [None, 2])
def test_degree1_equals_statsmodels_lowess(decimals: int | None) -> None:
    x, y = _binary(1, 400, decimals)
    curve = loess(x, y, span=0.6, degree=1)
    # statsmodels.nonparametric.lowess: local linear, tricube, it=0 (no robustness), delta=0.
    ref = lowess(y, x, frac=0.6, it=0, delta=0.0)
    xs, idx = np.unique(ref[:, 0], return_index=True)
    assert curve.exact
    np.testing.assert_allclose(curve.x, xs, atol=0)
    np.testing.assert_allclose(curve.fitted, ref[idx, 1], atol=1e-10)
    np.testing.assert_allclose(
        curve.at(x),
        ref[np.argsort(np.argsort(x, kind="stable"), kind="stable"), 1][...],
        atol=1e-10,
    )


def test_degree2_equals_direct_weighted_polyfit() -> None:
    x, y = _binary(2, 150)
    span = 0.75
    curve = loess(x, y, span=span, degree=2)
    q = int(np.floor(span * x.size))
    xs = np.sort(x)
    for i in range(0, xs.size, 10):  # independent computation, one point at a time
        d = np.abs(x - xs[i])
        h = np.sort(d)[q - 1]
        w = np.clip(1 - (d / h) ** 3, 0, None) ** 3
        coef = np.polyfit(x - xs[i], y, 2, w=np.sqrt(w))  # polyfit weights multiply residuals
        assert curve.fitted[i] == pytest.approx(coef[-1], abs=1e-9)


def test_binned_approximation_is_close_to_exact() -> None:
    x, y = _binary(3, 4_000)
    exact = loess(x, y, max_points=5_000)
    binned = loess(x, y, max_points=400)
    assert exact.exact and not binned.exact
    assert "binned approximation" in binned.method
    grid = np.linspace(x.min(), x.max(), 50)
    np.testing.assert_allclose(binned.at(grid), exact.at(grid), atol=3e-3)


def test_frequency_weights_equal_repeated_rows() -> None:
    x, y = _binary(4, 120)
    w = np.random.default_rng(4).integers(1, 4, x.size)
    a = loess(x, y, weights=w, degree=1)
    b = loess(np.repeat(x, w), np.repeat(y, w), degree=1)
    np.testing.assert_allclose(a.at(x), b.at(x), atol=1e-10)


def test_bad_options_are_spec_errors() -> None:
    x, y = _binary(5, 50)
    with pytest.raises(SpecError) as exc:
        loess(x, y, span=1.5)
    assert exc.value.field == "span"
    with pytest.raises(SpecError):
        loess(x, y, degree=3)
