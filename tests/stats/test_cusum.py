"""Risk-adjusted Bernoulli CUSUM (Steiner et al. 2000): scores, recursion, limits, simulations."""

from __future__ import annotations

import numpy as np
import pytest
from scipy.special import expit, logit

from service.errors import SpecError
from service.stats.cusum import (
    cusum,
    cusum_scores,
    limit_for_arl,
    limit_for_false_alarm,
    two_sided_cusum,
)


def _population(rng: np.random.Generator, n: int) -> np.ndarray:
    """Predicted risks of a seeded case mix: logit ~ N(-2.2, 0.8), mean risk about 0.12."""
    return expit(rng.normal(-2.2, 0.8, n))


def test_scores_are_the_log_likelihood_ratio() -> None:
    # Steiner et al. 2000: W = log of the Bernoulli likelihood ratio, alternative odds R x odds.
    rng = np.random.default_rng(0)
    p = rng.uniform(0.01, 0.9, 200)
    y = (rng.random(200) < p).astype(float)
    for R in (2.0, 0.5):
        p1 = R * p / (1 - p + R * p)
        direct = np.log(np.where(y == 1, p1 / p, (1 - p1) / (1 - p)))
        np.testing.assert_allclose(cusum_scores(y, p, R), direct, rtol=1e-12, atol=1e-14)


@pytest.mark.parametrize("restart", [True, False])
def test_path_equals_the_explicit_recursion(restart: bool) -> None:
    rng = np.random.default_rng(1)
    p = _population(rng, 3000)
    y = (rng.random(3000) < expit(logit(p) + 0.7)).astype(float)
    h = 3.0
    chart = cusum(y, p, odds_ratio=2.0, h=h, start=100, restart_after_signal=restart)
    w = cusum_scores(y, p, 2.0)
    s, path, signals = 0.0, [], []
    for t, wt in enumerate(w):  # the definition, one record at a time
        s = max(0.0, s + wt)
        path.append(s)
        if s >= h:
            signals.append(100 + t)
            if restart:
                s = 0.0
    # the stored path shows the value that crossed; a restart applies from the next record
    np.testing.assert_allclose(chart.path, np.array(path), atol=1e-9)
    assert chart.signals == tuple(signals) and len(signals) >= 2
    assert chart.n_obs == 3000 and chart.n_events == y.sum()


def test_arl_limit_reproduced_by_independent_simulation() -> None:
    rng = np.random.default_rng(2)
    ref = _population(rng, 5000)
    lim = limit_for_arl(ref, odds_ratio=2.0, target_arl=200, n_sims=1000, seed=3)
    assert lim.criterion == "arl" and lim.censored_fraction < 0.01
    assert lim.achieved == pytest.approx(200, rel=0.02)
    sim = np.random.default_rng(4)
    runs = []
    for _ in range(600):  # fresh case mix, run each stream through the public chart
        p = _population(sim, 4000)
        y = (sim.random(4000) < p).astype(float)
        ch = cusum(y, p, odds_ratio=2.0, h=lim.h)
        runs.append(ch.signals[0] + 1 if ch.signals else 4000)
    # run lengths are roughly geometric (SD ~ mean): +/-15% is about 3.5 standard errors
    assert np.mean(runs) == pytest.approx(200, rel=0.15)


def test_calibrated_streams_rarely_alarm_and_intercept_shift_is_flagged() -> None:
    # Design: two-sided monitor (R = 2 up, R = 0.5 down), false-alarm rate 4% within 1000
    # outcomes (2% per chart). Check: simulated rate within +/-25% of 4%, so >= 95% of
    # calibrated runs raise no alarm.
    rng = np.random.default_rng(10)
    ref = _population(rng, 5000)
    base = two_sided_cusum(
        np.zeros(1), np.full(1, 0.1), ref, horizon=1000, false_alarm_rate=0.04, n_sims=4000, seed=11
    )
    h_up, h_dn = base.limit_up.h, base.limit_down.h
    sim = np.random.default_rng(12)
    alarms = 0
    n_runs = 3000
    for _ in range(n_runs):
        p = _population(sim, 1000)
        y = (sim.random(1000) < p).astype(float)
        up = cusum(y, p, odds_ratio=2.0, h=h_up)
        dn = cusum(y, p, odds_ratio=0.5, h=h_dn)
        alarms += bool(up.signals or dn.signals)
    rate = alarms / n_runs
    assert 0.03 <= rate <= 0.05
    assert 1 - rate >= 0.95
    # +0.5 on the logit scale (odds ratio 1.65): flagged by the upward chart, usually fast.
    first = []
    for _ in range(200):
        p = _population(sim, 3000)
        y = (sim.random(3000) < expit(logit(p) + 0.5)).astype(float)
        ch = cusum(y, p, odds_ratio=2.0, h=h_up)
        first.append(ch.signals[0] + 1 if ch.signals else np.inf)
    first_arr = np.array(first)
    assert np.median(first_arr) <= 400
    assert np.mean(first_arr <= 1000) >= 0.9  # within the design horizon in >= 90% of runs
    assert np.all(first_arr <= 3000)


def test_false_alarm_limit_properties_and_bad_options() -> None:
    ref = _population(np.random.default_rng(5), 2000)
    lim = limit_for_false_alarm(
        ref, odds_ratio=2.0, horizon=500, false_alarm_rate=0.1, n_sims=1000, seed=1
    )
    assert lim.achieved == pytest.approx(0.1, abs=0.002) and lim.horizon == 500
    tighter = limit_for_false_alarm(
        ref, odds_ratio=2.0, horizon=500, false_alarm_rate=0.01, n_sims=1000, seed=1
    )
    assert tighter.h > lim.h
    with pytest.raises(SpecError) as exc:
        cusum([0, 1], [0.1, 0.2], odds_ratio=1.0, h=2.0)
    assert exc.value.field == "odds_ratio"
    with pytest.raises(SpecError):
        cusum([0, 1], [0.1, 0.2], odds_ratio=2.0, h=0.0)
