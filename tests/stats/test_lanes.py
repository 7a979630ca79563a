"""The two-lane pass: same sums with one or two threads, errors name the first bad row."""

from __future__ import annotations

import threading
from collections.abc import Iterator

import numpy as np
import pytest
import statsmodels.api as sm

from service.errors import DataError
from service.stats import lanes
from service.stats.blocks import array_blocks
from service.stats.fit import fit_logistic
from service.stats.likelihood import chunk_rows, loglik_pass, scan


@pytest.fixture
def threads(monkeypatch: pytest.MonkeyPatch) -> Iterator[None]:
    # Small designs here: let two threads work from one term on, so the split path runs.
    monkeypatch.setattr(lanes, "PARALLEL_MIN_TERMS", 1)
    before = lanes.pass_threads()
    yield
    lanes.set_pass_threads(before)


def _data(n: int, seed: int) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    X = np.column_stack([np.ones(n), rng.standard_normal((n, 4))])
    eta = X @ np.array([-1.0, 0.5, -0.3, 0.2, 0.8])
    y = (rng.random(n) < 1.0 / (1.0 + np.exp(-eta))).astype(float)
    return X, y, rng.random(n) * 2.0, rng.normal(0.0, 0.1, n)


@pytest.mark.parametrize("method", ["mle", "firth"])
def test_one_and_two_threads_agree_bit_for_bit(method: str, threads: None) -> None:
    # Determinism is by construction (fixed lanes, summed in lane order); this would fail if the
    # lane split depended on the thread count or on scheduling.
    X, y, w, off = _data(70_001, 5)
    fits = []
    for n in (1, 2, 2):
        lanes.set_pass_threads(n)
        fits.append(fit_logistic(X, y, weights=w, offset=off, method=method, block_rows=30_000))
    for other in fits[1:]:
        assert np.array_equal(fits[0].coef, other.coef)
        assert np.array_equal(fits[0].cov, other.cov)
        assert fits[0].loglik == other.loglik


def test_split_pass_matches_statsmodels(threads: None) -> None:
    # Reference: statsmodels GLM(Binomial) with freq_weights and offset (score and Hessian sums
    # over the two lanes must equal the one-shot computation).
    lanes.set_pass_threads(2)
    X, y, w, off = _data(50_000, 9)
    fit = fit_logistic(X, y, weights=w, offset=off)
    ref = sm.GLM(y, X, family=sm.families.Binomial(), freq_weights=w, offset=off).fit(tol=1e-14)
    np.testing.assert_allclose(fit.coef, ref.params, rtol=1e-8)
    np.testing.assert_allclose(fit.std_error, ref.bse, rtol=1e-8)
    t = loglik_pass(array_blocks(X, y, w, off, 50_000), ref.params)
    np.testing.assert_allclose(t.loglik, ref.llf, rtol=1e-12)


def test_lane_slices_split_on_chunk_boundaries() -> None:
    assert lanes.lane_slices(1000, chunk_rows(4)) == [slice(0, 1000)]
    parts = lanes.lane_slices(65_536, chunk_rows(4))
    assert [(s.start, s.stop) for s in parts] == [(0, 32_768), (32_768, 65_536)]
    odd = lanes.lane_slices(50_001, chunk_rows(4))
    assert odd[0].stop % chunk_rows(4) == 0 and odd[1].stop == 50_001


@pytest.mark.parametrize("n_threads", [1, 2])
def test_bad_value_in_second_lane_names_its_global_row(n_threads: int, threads: None) -> None:
    lanes.set_pass_threads(n_threads)
    X, y, _, _ = _data(100_000, 3)
    X[90_123, 2] = np.nan  # second block (rows 65,536-99,999), second lane
    with pytest.raises(DataError) as err:
        scan(array_blocks(X, y, None, None, 65_536), 5, tuple(f"t{j}" for j in range(5)))
    assert err.value.field == "X[90123, 2]"


def test_first_lane_error_wins_when_both_lanes_fail(threads: None) -> None:
    lanes.set_pass_threads(2)
    X, y, _, _ = _data(65_536, 4)
    y[40_000] = 2.0  # lane 1 of the only block
    y[10] = -1.0  # lane 0
    with pytest.raises(DataError) as err:
        scan(array_blocks(X, y, None, None, 65_536), 5, tuple(f"t{j}" for j in range(5)))
    assert err.value.field == "y[10]"


def test_thread_count_is_validated(threads: None) -> None:
    with pytest.raises(ValueError):
        lanes.set_pass_threads(0)
    lanes.set_pass_threads(8)
    assert lanes.pass_threads() == 2


def test_a_lane_that_starts_a_pass_runs_it_inline(threads: None) -> None:
    # A task on the lane worker that itself calls run_lanes must not wait for that worker.
    lanes.set_pass_threads(2)
    seen: list[str] = []

    def inner() -> None:
        lanes.run_lanes([lambda: seen.append("a"), lambda: seen.append("b")])

    lanes.run_lanes([lambda: None, inner])
    assert sorted(seen) == ["a", "b"]


def test_few_terms_stay_in_one_thread() -> None:
    # Below PARALLEL_MIN_TERMS the lanes run in the caller (both lanes, same sums).
    where: list[str] = []

    def note() -> None:
        where.append(threading.current_thread().name)

    lanes.run_lanes([note, note], n_terms=lanes.PARALLEL_MIN_TERMS - 1)
    assert where == [threading.current_thread().name] * 2


def test_scan_finds_the_first_non_finite_value_even_in_a_zero_weight_row() -> None:
    # The scan checks X through the diagonal of X'WX (module docstring of likelihood): a zero
    # weight must not hide an infinity (0 * inf is NaN), and with two bad blocks the error
    # names the earlier row.
    X, y, w, _ = _data(150_000, 8)
    w[70_001] = 0.0
    X[70_001, 3] = np.inf
    X[120_000, 1] = np.nan
    with pytest.raises(DataError) as err:
        fit_logistic(X, y, weights=w)
    assert err.value.field == "X[70001, 3]"


def test_values_too_large_to_square_are_refused_by_name() -> None:
    # Finite but |x| > ~1.3e154: x^2 overflows, so the cross-products would be infinite.
    X, y, _, _ = _data(5_000, 9)
    X[1_234, 2] = 1e200
    with pytest.raises(DataError) as err:
        fit_logistic(X, y, term_names=["intercept", "a", "b", "c", "d"])
    assert err.value.field == "X[1234, 2]" and "'b'" in err.value.message
    assert "rescale" in (err.value.remedy or "")
