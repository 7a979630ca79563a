"""Model updating, closed testing and gates: seeded scenarios with known truth, statsmodels."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm
from scipy.special import expit
from sklearn.metrics import roc_auc_score

from service.errors import NotEnoughOutcomesError, SpecError
from service.stats.updating import (
    GateConfig,
    closed_test,
    evaluate_gates,
    fit_update,
    update_coefficients,
)

TRUE = np.array([-2.0, 0.8, -0.5, 0.4, 0.0])
OVERFITTED = np.r_[-2.0, 1.6 * TRUE[1:]]  # too extreme, as a small development sample gives


def _data(seed: int, n: int, coef: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    X = np.column_stack([np.ones(n), rng.normal(size=(n, coef.size - 1))])
    return X, (rng.random(n) < expit(X @ coef)).astype(float)


SCENARIOS = {
    "unchanged": (TRUE, TRUE),  # no change
    "intercept": (TRUE, TRUE + np.r_[0.6, 0, 0, 0, 0]),  # pure intercept shift
    "recalibrate": (OVERFITTED, TRUE),  # slope change of an over-fitted original
    "refit": (TRUE, TRUE + np.r_[0, 0, 0.9, 0, 0]),  # a changed effect
}


@pytest.mark.parametrize("expected", list(SCENARIOS))
def test_closed_test_picks_the_update_the_truth_calls_for(expected: str) -> None:
    old, new = SCENARIOS[expected]
    picks = [closed_test(*_data(seed, 3000, new), old).chosen for seed in range(10)]
    # at alpha = 0.05 an occasional wrong pick is expected; 9 of 10 seeded runs must agree
    assert picks.count(expected) >= 9, picks


def test_reasons_name_the_tests() -> None:
    X, y = _data(1, 3000, SCENARIOS["intercept"][1])
    r = closed_test(X, y, TRUE)
    assert r.chosen == "intercept"
    assert [t.model for t in r.tests] == ["unchanged", "intercept"]
    assert "LR test unchanged vs refit" in r.reasons[0] and "significantly worse" in r.reasons[0]
    assert "LR test intercept vs refit" in r.reasons[1] and "not significantly" in r.reasons[1]
    np.testing.assert_allclose(r.coef[1:], TRUE[1:])  # only the intercept moved
    assert r.coef[0] == pytest.approx(TRUE[0] + r.models[1].intercept)


@pytest.mark.parametrize("weighted", [False, True])
def test_lr_statistics_equal_statsmodels_glm_with_offsets(weighted: bool) -> None:
    X, y = _data(3, 2500, SCENARIOS["recalibrate"][1])
    w = np.random.default_rng(3).integers(1, 3, y.size).astype(float) if weighted else None
    kw = {"freq_weights": w} if weighted else {}
    eta = X @ OVERFITTED
    fam = sm.families.Binomial()
    # statsmodels GLM Binomial fits of the same nested models (offset = old linear predictor)
    ll_unchanged = sm.GLM(y, X, family=fam, **kw).loglike(OVERFITTED)
    ll_int = sm.GLM(y, np.ones((y.size, 1)), family=fam, offset=eta, **kw).fit().llf
    ll_recal = sm.GLM(y, sm.add_constant(eta), family=fam, **kw).fit().llf
    ll_refit = sm.GLM(y, X, family=fam, **kw).fit().llf
    r = closed_test(X, y, OVERFITTED, weights=w, alpha=1 - 1e-12)  # every test is made
    assert [t.model for t in r.tests] == ["unchanged", "intercept", "recalibrate"]
    got = {t.model: (t.statistic, t.df) for t in r.tests}
    lls = [m.loglik for m in r.models]
    np.testing.assert_allclose(lls, [ll_unchanged, ll_int, ll_recal, ll_refit], rtol=0, atol=1e-6)
    for model, ll, df in (
        ("unchanged", ll_unchanged, 5),
        ("intercept", ll_int, 4),
        ("recalibrate", ll_recal, 3),
    ):
        assert got[model][0] == pytest.approx(2 * (ll_refit - ll), abs=1e-6)
        assert got[model][1] == df


def test_recalibrated_coefficients_follow_the_algebra() -> None:
    X, y = _data(4, 2000, TRUE)
    m = fit_update("recalibrate", X, y, OVERFITTED)
    # a + b * (X coef_old) == X coef_new for every row
    np.testing.assert_allclose(X @ m.coef, m.intercept + m.slope * (X @ OVERFITTED), atol=1e-12)
    assert m.slope == pytest.approx(1 / 1.6, abs=0.12)  # the truth is shrinkage by 1/1.6
    np.testing.assert_allclose(update_coefficients([1.0, 2.0], 0.5, 2.0), [2.5, 4.0])


def test_two_column_model_skips_the_zero_df_test() -> None:
    X, y = _data(5, 2000, np.array([-1.0, 0.5]))
    r = closed_test(X, y, np.array([-0.2, 1.5]))
    assert r.chosen == "recalibrate" and "without a test" in r.reasons[-1]


def test_gates_pass_for_a_better_challenger_and_fail_for_a_worse() -> None:
    X, y = _data(6, 4000, TRUE + np.r_[0.6, 0, 0, 0, 0])
    champion, challenger = expit(X @ TRUE), expit(X @ (TRUE + np.r_[0.6, 0, 0, 0, 0]))
    good = evaluate_gates(y, champion, challenger)
    assert good.passed and [g.name for g in good.gates] == [
        "log_loss",
        "brier",
        "calibration_slope",
        "auc",
    ]
    ll = good.gates[0]
    assert ll.ci_upper is not None and ll.ci_upper < 0 and "log-loss" in ll.reason
    bad = evaluate_gates(y, challenger, champion)
    assert not bad.passed and not bad.gates[0].passed
    # AUC gate value is the paired difference; check it against scikit-learn roc_auc_score
    assert good.gates[3].value == pytest.approx(
        roc_auc_score(y, challenger) - roc_auc_score(y, champion), abs=1e-12
    )
    noisy = expit(X @ TRUE * 2.0)  # over-confident: slope about 0.5
    over = evaluate_gates(y, champion, noisy)
    assert not over.gates[2].passed and "outside" in over.gates[2].reason


def test_log_loss_gate_interval_equals_direct_paired_computation() -> None:
    X, y = _data(7, 1500, TRUE)
    pc, pq = expit(X @ TRUE), expit(X @ (TRUE * 0.9))
    d = -(y * np.log(pq) + (1 - y) * np.log(1 - pq)) + (y * np.log(pc) + (1 - y) * np.log(1 - pc))
    se = d.std(ddof=1) / np.sqrt(d.size)  # normal approximation, per-record differences
    g = evaluate_gates(y, pc, pq, GateConfig(require_significant_log_loss=False)).gates[0]
    assert g.value == pytest.approx(d.mean(), rel=1e-10)
    assert g.ci_upper == pytest.approx(d.mean() + 1.959963984540054 * se, rel=1e-9)


def test_gate_errors() -> None:
    with pytest.raises(SpecError):
        GateConfig(slope_bounds=(1.2, 0.8))
    with pytest.raises(NotEnoughOutcomesError) as exc:
        evaluate_gates([0, 1] * 20, np.full(40, 0.5), np.full(40, 0.5))
    assert exc.value.details["n"] == 40
    with pytest.raises(SpecError):
        closed_test(np.ones((10, 1)) * 2, np.r_[np.zeros(5), np.ones(5)], [0.0])
