"""Drop-term LR tests (warm-started, decrement stop) against a cold constrained Newton refit
and against statsmodels' restricted fit (``statsmodels.api.Logit(...).fit().llf``)."""

from __future__ import annotations

import numpy as np
import pytest
import statsmodels.api as sm

from service.stats.blocks import BlockSource, array_blocks
from service.stats.fit import constrained_fit, fit_logistic
from service.stats.inference import drop_term_tests
from service.stats.likelihood import Totals
from service.stats.newton import Objective

GROUPS = {"x1": [1], "x2": [2], "level": [3, 4], "x5": [5]}


def _data(n: int, seed: int) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    X = np.column_stack([np.ones(n), rng.standard_normal((n, 2)), np.zeros((n, 3))])
    level = rng.integers(0, 3, n)
    X[:, 3], X[:, 4] = level == 1, level == 2
    X[:, 5] = rng.exponential(1.0, n)
    eta = X @ np.array([-1.0, 1.2, -0.6, 0.8, -0.5, 0.3])
    y = (rng.random(n) < 1.0 / (1.0 + np.exp(-eta))).astype(float)
    return X, y


@pytest.mark.parametrize(("method", "lam"), [("mle", 0.0), ("firth", 0.0), ("ridge", 2.0)])
def test_drop_terms_equal_a_cold_constrained_refit(method: str, lam: float) -> None:
    X, y = _data(3000, 11)
    fit = fit_logistic(X, y, method=method, ridge_lambda=lam)  # type: ignore[arg-type]
    blocks = array_blocks(X, y, None, None)
    got = {t.name: t.statistic for t in drop_term_tests(blocks, fit, GROUPS)}
    for name, cols in GROUPS.items():
        # the previous way: Newton from the full estimate with the columns zeroed, tol 1e-10
        cold = constrained_fit(blocks, fit, dict.fromkeys(cols, 0.0), tol=1e-12)
        want = 2.0 * (fit.penalized_loglik - cold.penalized_loglik)
        assert got[name] == pytest.approx(want, rel=1e-8, abs=1e-8), name


def test_drop_terms_match_statsmodels_restricted_fits() -> None:
    X, y = _data(5000, 12)
    fit = fit_logistic(X, y)
    blocks = array_blocks(X, y, None, None)
    got = {t.name: t.statistic for t in drop_term_tests(blocks, fit, GROUPS)}
    full = sm.Logit(y, X).fit(method="newton", tol=1e-12, disp=0).llf
    for name, cols in GROUPS.items():
        keep = [j for j in range(X.shape[1]) if j not in cols]
        restricted = sm.Logit(y, X[:, keep]).fit(method="newton", tol=1e-12, disp=0).llf
        assert got[name] == pytest.approx(2.0 * (full - restricted), rel=1e-8), name


def _no_full_pass(self: Objective, coef: np.ndarray) -> None:
    raise AssertionError("a pass with the information ran")


@pytest.mark.parametrize(
    ("method", "lam", "chord"),
    [("mle", 0.0, True), ("ridge", 2.0, True), ("mle", 0.0, False), ("ridge", 2.0, False)],
)
def test_passes_without_information_keep_the_statistics(
    method: str, lam: float, chord: bool, monkeypatch: pytest.MonkeyPatch
) -> None:
    # Large n. With chord steps (the default) all four refits share a few passes without the
    # information, and no Newton pass is needed; without them Newton runs, and some refits'
    # last pass skips the information (here those of x1 and x5; x2 and level stop one full
    # pass later). Either way the statistics equal cold refits and statsmodels.
    import service.stats.drop_terms as drop_terms

    if not chord:
        monkeypatch.setattr(drop_terms, "_chord_refits", lambda *args: {})

    calls: list[bool] = []
    real = drop_terms.loglik_pass

    def counted(blocks: BlockSource, coef: np.ndarray, *, want_info: bool = True) -> Totals:
        calls.append(want_info)
        return real(blocks, coef, want_info=want_info)

    monkeypatch.setattr(drop_terms, "loglik_pass", counted)
    shared: list[int] = []
    real_shared = drop_terms.score_pass

    def counted_shared(blocks: BlockSource, C: np.ndarray):  # type: ignore[no-untyped-def]
        shared.append(C.shape[1])
        return real_shared(blocks, C)

    monkeypatch.setattr(drop_terms, "score_pass", counted_shared)
    X, y = _data(200_000, 13)
    fit = fit_logistic(X, y, method=method, ridge_lambda=lam)  # type: ignore[arg-type]
    blocks = array_blocks(X, y, None, None)
    if chord:
        monkeypatch.setattr(Objective, "evaluate", _no_full_pass)
    got = {t.name: t.statistic for t in drop_term_tests(blocks, fit, GROUPS)}
    monkeypatch.undo()  # the cold refits below run Newton
    if chord:
        assert not calls and shared[0] == len(GROUPS) and len(shared) <= 12, shared
    else:
        assert calls.count(False) >= 2 and not shared, calls
    for name, cols in GROUPS.items():
        cold = constrained_fit(blocks, fit, dict.fromkeys(cols, 0.0), tol=1e-12)
        want = 2.0 * (fit.penalized_loglik - cold.penalized_loglik)
        # chord refits stop at a decrement of 5e-9 of the statistic: right to ~2e-9 of it
        assert got[name] == pytest.approx(want, rel=2e-9, abs=1e-8), name
    if method == "mle":
        full = sm.Logit(y, X).fit(method="newton", tol=1e-12, disp=0).llf
        for name, cols in GROUPS.items():
            keep = [j for j in range(X.shape[1]) if j not in cols]
            restricted = sm.Logit(y, X[:, keep]).fit(method="newton", tol=1e-12, disp=0).llf
            assert got[name] == pytest.approx(2.0 * (full - restricted), rel=1e-8), name


def test_a_slow_chord_gives_way_to_newton(monkeypatch: pytest.MonkeyPatch) -> None:
    # Demand a contraction no chord reaches: every refit starts with chord steps, gives way
    # after the second pass, and Newton from the start must still give the statsmodels values.
    import service.stats.drop_terms as drop_terms

    monkeypatch.setattr(drop_terms, "CHORD_MIN_CONTRACTION", 1e300)
    X, y = _data(5000, 14)
    fit = fit_logistic(X, y)
    got = {t.name: t.statistic for t in drop_term_tests(array_blocks(X, y), fit, GROUPS)}
    full = sm.Logit(y, X).fit(method="newton", tol=1e-12, disp=0).llf  # statsmodels Logit
    for name, cols in GROUPS.items():
        keep = [j for j in range(X.shape[1]) if j not in cols]
        restricted = sm.Logit(y, X[:, keep]).fit(method="newton", tol=1e-12, disp=0).llf
        assert got[name] == pytest.approx(2.0 * (full - restricted), rel=1e-8), name
