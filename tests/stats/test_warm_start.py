"""The subsample start: same maximum as the cold start, fewer passes, refused when it is poor."""

from __future__ import annotations

import numpy as np
import statsmodels.api as sm

from service.stats.blocks import Block, array_blocks
from service.stats.fit import fit_logistic
from service.stats.fit_options import FitOptions
from service.stats.fit_start import newton_from_scan
from service.stats.likelihood import scan
from service.stats.newton import Objective, newton
from service.stats.row_sample import RowSample
from service.stats.warm_start import (
    CHORD_MAX_STEPS,
    SAMPLE_ROWS_PER_TERM,
    WARM_START_MIN_ROWS,
    first_state,
    sample_start,
    worth_a_start,
)

N = 300_000  # above WARM_START_MIN_ROWS
NAMES = tuple(f"x{j}" for j in range(6))


def _data(seed: int, rare_rows: np.ndarray | None = None) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    X = np.column_stack([np.ones(N), rng.standard_normal((N, 4)), np.zeros(N)])
    if rare_rows is not None:
        X[rare_rows, 5] = 1.0
    eta = X @ np.array([-1.2, 0.6, -0.4, 0.3, 0.9, 0.5])
    y = (rng.random(N) < 1.0 / (1.0 + np.exp(-eta))).astype(float)
    return X, y


def _cold(X: np.ndarray, y: np.ndarray, w: np.ndarray, off: np.ndarray):  # type: ignore[no-untyped-def]
    """Newton from the intercept-only start on the same data (the engine without a sample)."""
    blocks = array_blocks(X, y, w, off)
    names = NAMES[: X.shape[1]]
    mask = np.r_[0.0, np.ones(X.shape[1] - 1)]
    summary = scan(blocks, X.shape[1], names)
    return newton_from_scan(
        lambda m: Objective(blocks, "mle", 0.0, mask),
        summary,
        FitOptions(names, "mle", 0.0, 0, 100, 1e-10),
    )


def _sample(X: np.ndarray, y: np.ndarray):  # type: ignore[no-untyped-def]
    sample = RowSample()
    scan(array_blocks(X, y), X.shape[1], NAMES[: X.shape[1]], sample)
    return sample.source()


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
    np.testing.assert_allclose(warm.coef, cold.state.coef, rtol=1e-9, atol=1e-11)
    assert warm.converged and cold.converged
    assert warm.iterations < cold.iterations


def test_sample_is_every_16th_row_whatever_the_blocks() -> None:
    X, y = _data(3)
    want = np.flatnonzero(np.arange(N) % 16 == 0)
    for block_rows in (65_536, 10_007):  # a block size that does not divide by 16
        sample = RowSample(max_rows=N)
        scan(array_blocks(X, y, None, None, block_rows), X.shape[1], NAMES, sample)
        got = np.concatenate([b.X for b in sample.source()()])
        np.testing.assert_array_equal(got, X[want])
        assert sample.rows == want.size and sample.stride == 16


def test_sample_thins_to_a_wider_stride_past_its_cap() -> None:
    # 300,000 rows, at most 5,000 kept: the stride doubles from 16 to 64 (4,688 rows); the rows
    # kept are the multiples of 64, as if that stride had been used from the start.
    X, y = _data(4)
    sample = RowSample(max_rows=5_000)
    for lo in range(0, N, 7_001):
        sample.add(Block(X[lo : lo + 7_001], y[lo : lo + 7_001], None, None), lo)
    got = np.concatenate([b.y for b in sample.source()()])
    np.testing.assert_array_equal(got, y[::64])
    assert sample.stride == 64 and sample.rows == len(y[::64]) <= 5_000


def test_no_start_is_sought_for_small_or_wide_data() -> None:
    X, y = _data(5)
    rows = WARM_START_MIN_ROWS - 1
    sample = RowSample()
    summary = scan(array_blocks(X[:rows], y[:rows]), X.shape[1], NAMES, sample)
    assert not worth_a_start(summary, sample.rows, X.shape[1])
    sample = RowSample()
    summary = scan(array_blocks(X, y), X.shape[1], NAMES, sample)
    assert worth_a_start(summary, sample.rows, X.shape[1])
    wide_p = sample.rows // SAMPLE_ROWS_PER_TERM + 1  # too few sampled rows per term
    assert not worth_a_start(summary, sample.rows, wide_p)


def test_rare_column_missing_from_the_sample_falls_back_to_the_cold_start() -> None:
    # 40 rows carry the rare indicator, none of them on the sampled rows (multiples of 16):
    # the sample's design is rank deficient there, so it gives no start, and the fit is the
    # ordinary one.
    rare = np.arange(40) * 16 * 97 + 5
    X, y = _data(21, rare)
    assert sample_start(_sample(X, y), NAMES, 0) is None
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
    assert sample_start(_sample(X, y), NAMES, 0) is None
    fit = fit_logistic(X, y)
    ref = sm.Logit(y, X).fit(method="newton", tol=1e-12, disp=False)  # statsmodels Logit Newton
    np.testing.assert_allclose(fit.coef, ref.params, rtol=1e-8, atol=1e-10)
    np.testing.assert_allclose(fit.std_error, ref.bse, rtol=1e-8)


class _Passes(Objective):
    """Counts passes with and without the information."""

    def __init__(self, *args, **kwargs) -> None:  # type: ignore[no-untyped-def]
        super().__init__(*args, **kwargs)
        self.full = 0
        self.score_only = 0

    def evaluate(self, coef, *, rounded=False):  # type: ignore[no-untyped-def]
        self.full += 1
        return super().evaluate(coef, rounded=rounded)

    def evaluate_without_information(self, coef):  # type: ignore[no-untyped-def]
        self.score_only += 1
        return super().evaluate_without_information(coef)


def _chord_setup(seed: int):  # type: ignore[no-untyped-def]
    X, y = _data(seed)
    X = X[:, :5]
    blocks = array_blocks(X, y)
    sample = RowSample()
    summary = scan(blocks, X.shape[1], NAMES[:5], sample)
    start = sample_start(sample.source(), NAMES[:5], 0)
    assert start is not None
    best = sm.Logit(y, X).fit(method="newton", tol=1e-12, disp=False).params  # statsmodels
    return blocks, summary, start, best


def test_the_chord_step_from_the_sample_lands_closer_to_the_maximum() -> None:
    # first_state: one step with the sample's information scaled to the full weight. Here it
    # must cut the distance to the full maximum (statsmodels Logit Newton) at least tenfold.
    blocks, summary, start, best = _chord_setup(51)
    obj = Objective(blocks, "mle", 0.0, np.r_[0.0, np.ones(4)])
    state = first_state(obj, start, summary.sum_weights)
    assert state is not None
    before = np.max(np.abs(start.coef - best))
    after = np.max(np.abs(state.coef - best))
    assert after < before / 10, (before, after)


def test_more_chord_steps_land_closer_for_passes_without_the_information() -> None:
    # Several chord steps (each a pass without the information) against one: closer to the
    # statsmodels Logit maximum, and still only one pass with the information.
    blocks, summary, start, best = _chord_setup(53)
    mask = np.r_[0.0, np.ones(4)]
    one = _Passes(blocks, "mle", 0.0, mask)
    many = _Passes(blocks, "mle", 0.0, mask)
    s1 = first_state(one, start, summary.sum_weights)
    s6 = first_state(many, start, summary.sum_weights, max_chord_steps=CHORD_MAX_STEPS)
    assert s1 is not None and s6 is not None
    assert (one.full, one.score_only) == (1, 1)
    assert many.full == 1 and 2 <= many.score_only <= CHORD_MAX_STEPS
    err1 = np.max(np.abs(s1.coef - best))
    err6 = np.max(np.abs(s6.coef - best))
    assert err6 < err1 / 10, (err1, err6)


def test_chord_steps_that_do_not_climb_give_way_to_newton() -> None:
    # A sample information far too small makes the chord step overshoot (the log-likelihood
    # falls): first_state returns the full state at the sample's maximum instead, and Newton
    # from there still ends at the statsmodels Logit maximum.
    from dataclasses import replace

    blocks, summary, start, best = _chord_setup(57)
    bad = replace(start, info=start.info * 1e-3)
    obj = _Passes(blocks, "mle", 0.0, np.r_[0.0, np.ones(4)])
    state = first_state(obj, bad, summary.sum_weights, max_chord_steps=CHORD_MAX_STEPS)
    assert state is not None
    np.testing.assert_array_equal(state.coef, start.coef)
    assert obj.full == 1
    res = newton(obj, state, np.ones(5, bool), max_iter=50, tol=1e-10)
    assert res.converged
    np.testing.assert_allclose(res.state.coef, best, rtol=1e-8, atol=1e-10)


def test_light_scan_keeps_the_diagonal_and_the_checks() -> None:
    # A fit of many rows scans without X'WX (only its diagonal); the diagonal must equal the
    # full scan's, and the full-data checks must still name the first bad value and the
    # collinear terms (here found again by the second, full scan after the sample is refused).
    import pytest

    from service.errors import DataError, RankDeficientError

    X, y = _data(61)
    X = X[:, :5]
    w = np.random.default_rng(62).random(N) * 2.0
    full = scan(array_blocks(X, y, w), 5, NAMES[:5])
    light = scan(array_blocks(X, y, w), 5, NAMES[:5], cross_products=False)
    assert light.xtwx is None and full.xtwx is not None
    np.testing.assert_allclose(light.sum_wx2, np.diag(full.xtwx), rtol=1e-12)
    np.testing.assert_allclose(light.xtw, full.xtw, rtol=1e-12)
    bad = X.copy()
    bad[200_001, 3] = np.nan
    bad[250_000, 1] = np.inf
    with pytest.raises(DataError) as err:
        fit_logistic(bad, y, weights=w)
    assert err.value.field == "X[200001, 3]"
    twin = np.column_stack([X, 2.0 * X[:, 2]])  # x5 = 2 x2: rank deficient
    with pytest.raises(RankDeficientError) as rank:
        fit_logistic(twin, y, term_names=[*NAMES[:5], "twice_x2"])
    assert {"x2", "twice_x2"} <= set(rank.value.details["terms"])
