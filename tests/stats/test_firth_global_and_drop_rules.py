"""Firth's global test and drop-term tests follow one rule; drop-term kinds and marginality.

References: the independent scipy.optimize solver of tests/stats/_penalised_reference.py
(restricted maxima of l(b) + 1/2 log det I_full(b), Heinze & Schemper 2002, *Statistics in
Medicine* 21:2409-2419), and statsmodels ``Logit`` refits of the reduced models for ML.
"""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm

from service.stats.blocks import array_blocks
from service.stats.drop_groups import (
    INTERACTION,
    MAIN_EFFECT,
    MAIN_EFFECT_ONLY,
    MAIN_EFFECT_WITH_INTERACTIONS,
    drop_groups,
)
from service.stats.fit import FIRTH_GLOBAL_TEST_RULE, fit_logistic
from service.stats.inference import drop_term_tests, global_lr_test
from tests.stats._penalised_reference import Penalised


def _singleton(seed: int, n: int = 200):  # type: ignore[no-untyped-def]
    rng = np.random.default_rng(seed)
    level = rng.integers(0, 2, n)
    level[0] = 2
    x = rng.normal(size=n)
    y = (rng.random(n) < 1 / (1 + np.exp(-(0.6 * x - 0.4)))).astype(float)
    y[0] = 1.0
    X = np.column_stack([np.ones(n), x, (level == 1).astype(float), (level == 2).astype(float)])
    w = rng.integers(1, 3, n).astype(float)
    off = 0.2 * rng.normal(size=n)
    return X, y, w, off


@pytest.mark.parametrize("weighted", [False, True])
def test_firth_global_null_is_fitted_under_the_full_penalty(weighted: bool) -> None:
    X, y, w, off = _singleton(41)
    w, off = (w, off) if weighted else (None, None)
    fit = fit_logistic(X, y, weights=w, offset=off, method="firth")
    assert fit.converged
    ref = Penalised(X, y, w, off)  # independent scipy solver, intercept free, slopes at 0
    free = np.array([True, False, False, False])
    null = ref.maximise(free=free)
    assert fit.null_penalized_loglik == pytest.approx(ref.value(null), abs=1e-8)
    g = global_lr_test(fit)
    full = ref.value(ref.maximise())
    assert g.statistic == pytest.approx(2 * (full - ref.value(null)), rel=1e-7, abs=1e-8)
    # the same number as the drop-term test of every non-intercept column (one rule)
    (drop,) = drop_term_tests(array_blocks(X, y, w, off), fit, {"all": [1, 2, 3]})
    assert g.statistic == pytest.approx(drop.statistic, rel=1e-7, abs=1e-7)
    assert FIRTH_GLOBAL_TEST_RULE.startswith("null model fitted under the full model's penalty")


def _interaction_data(seed: int, n: int = 800):  # type: ignore[no-untyped-def]
    rng = np.random.default_rng(seed)
    a = rng.normal(size=n)
    g = rng.integers(0, 3, n)
    b1, b2 = (g == 1).astype(float), (g == 2).astype(float)
    c = rng.normal(size=n)
    eta = -0.3 + 0.5 * a + 0.4 * b1 - 0.6 * b2 + 0.7 * a * b1 + 0.2 * c
    y = (rng.random(n) < 1 / (1 + np.exp(-eta))).astype(float)
    X = np.column_stack([np.ones(n), a, b1, b2, c, a * b1, a * b2])
    groups = {"intercept": (0,), "a": (1,), "g": (2, 3), "c": (4,), "a:g": (5, 6)}
    return X, y, groups


def test_drop_term_kinds_and_the_marginal_test_match_statsmodels() -> None:
    X, y, term_groups = _interaction_data(42)
    groups = drop_groups(term_groups, [("a", "g")])
    kinds = {name: (grp.kind, grp.dropped) for name, grp in groups.items()}
    assert kinds == {
        "a": (MAIN_EFFECT_ONLY, ("a",)),
        "g": (MAIN_EFFECT_ONLY, ("g",)),
        "c": (MAIN_EFFECT, ("c",)),
        "a:g": (INTERACTION, ("a:g",)),
        "a with interactions": (MAIN_EFFECT_WITH_INTERACTIONS, ("a", "a:g")),
        "g with interactions": (MAIN_EFFECT_WITH_INTERACTIONS, ("g", "a:g")),
    }
    fit = fit_logistic(X, y)
    tests = drop_term_tests(array_blocks(X, y), fit, groups)
    full = sm.Logit(y, X).fit(method="newton", tol=1e-14, disp=0)
    for t in tests:
        cols = list(groups[t.name].columns)
        # statsmodels Logit refit without the dropped columns: 2 (llf_full - llf_reduced)
        red = sm.Logit(y, np.delete(X, cols, axis=1)).fit(method="newton", tol=1e-14, disp=0)
        assert t.kind == groups[t.name].kind and t.dropped == groups[t.name].dropped
        assert t.df == len(cols)
        assert t.statistic == pytest.approx(2 * (full.llf - red.llf), rel=1e-7, abs=1e-8)
    by = {t.name: t for t in tests}
    assert by["a with interactions"].df == 3 and by["g with interactions"].df == 4


def test_firth_drop_terms_with_interactions_match_scipy() -> None:
    X, y, term_groups = _interaction_data(43, 150)
    groups = drop_groups(term_groups, [("a", "g")])
    fit = fit_logistic(X, y, method="firth")
    ref = Penalised(X, y)  # independent scipy solver, the full model's penalty throughout
    top = ref.value(ref.maximise())
    for t in drop_term_tests(array_blocks(X, y), fit, groups):
        free = np.ones(X.shape[1], bool)
        free[list(groups[t.name].columns)] = False
        restricted = ref.value(ref.maximise(free=free))
        assert t.statistic == pytest.approx(2 * (top - restricted), rel=1e-6, abs=1e-7)


def test_firth_null_without_intercept_is_the_full_penalty_at_zero() -> None:
    # no intercept: the null model has no free coefficient, l(0) + 1/2 log det I_full(0)
    X, y, _, _ = _singleton(44)
    X = X[:, 1:]
    fit = fit_logistic(X, y, method="firth", intercept_index=None)
    ref = Penalised(X, y, intercept=None)  # the definition, evaluated directly
    assert fit.null_penalized_loglik == pytest.approx(ref.value(np.zeros(3)), abs=1e-9)
