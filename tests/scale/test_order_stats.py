"""Exact streamed order statistics equal numpy's quantiles bit for bit (numpy.quantile is the
external reference: methods "linear" and "lower")."""

from __future__ import annotations

import numpy as np
import pytest

from service.sources.order_stats import OrderStatistics, quantile_ranks, quantiles_from

QUANTILES = [0.025, 0.05, 0.1, 0.1833, 0.35, 0.5, 0.65, 0.9, 0.95, 0.975]


def _data(kind: str, rng: np.random.Generator) -> np.ndarray:
    if kind == "normal":
        return rng.normal(size=100_003)
    if kind == "ties":
        return rng.integers(0, 4, 50_000).astype(float)
    if kind == "signs":
        return np.r_[-0.0, 0.0, rng.standard_cauchy(1_000) * 1e200, -5.0, 5e-320]
    return np.log(rng.uniform(1.0, 500.0, 80_000))


def _passes(x: np.ndarray, cap: int, method: str) -> tuple[np.ndarray, int]:
    parts = np.array_split(x, 9)
    stats = OrderStatistics(collect_cap=cap)
    for part in parts:
        stats.add(part)
    stats.want(quantile_ranks(x.size, QUANTILES, method))
    passes = 1
    while not stats.done:
        for part in parts:
            stats.add(part)
        stats.next_pass()
        passes += 1
    return quantiles_from(stats, QUANTILES, method), passes


@pytest.mark.parametrize("kind", ["normal", "ties", "signs", "log"])
@pytest.mark.parametrize("cap", [1 << 18, 50, 1])
@pytest.mark.parametrize("method", ["linear", "lower"])
def test_equal_to_numpy(kind: str, cap: int, method: str) -> None:
    x = _data(kind, np.random.default_rng(7))
    got, passes = _passes(x, cap, method)
    np.testing.assert_array_equal(got, np.quantile(x, QUANTILES, method=method))
    assert passes <= 5  # 16 bits per pass over 64-bit keys, plus the first pass


def test_two_passes_when_cells_are_small() -> None:
    x = np.random.default_rng(3).normal(size=200_000)
    assert _passes(x, 1 << 18, "linear")[1] == 2
