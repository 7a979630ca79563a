"""Existence checks: separation (LP and divergence signature), rank deficiency, counts."""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
import pytest

from service.errors import RankDeficientError, SeparationError, TooFewObservationsError
from service.stats import diagnostics
from service.stats.diagnostics import collinear_terms, separating_direction
from service.stats.fit import fit_logistic

Sim = Callable[..., tuple[np.ndarray, np.ndarray]]


def _empty_cell(make_data: Sim, n: int) -> tuple[np.ndarray, np.ndarray]:
    X, y = make_data(41, n, np.array([-0.5, 0.4, -0.3]))
    rare = (np.arange(n) % 50 == 0).astype(float)
    return np.column_stack([X, rare]), np.where(rare == 1, 0.0, y)


def test_divergence_signature_detects_separation_without_the_lp(
    make_data: Sim, monkeypatch: pytest.MonkeyPatch
) -> None:
    # Large-data path: the LP is switched off; quasi-complete separation (a level with no
    # events, Albert & Anderson 1984) must still be caught from the exploding SE.
    monkeypatch.setattr(diagnostics, "LP_ALWAYS_CELLS", 0)
    monkeypatch.setattr(diagnostics, "LP_MAX_CELLS", 0)
    X, y = _empty_cell(make_data, 2000)
    with pytest.raises(SeparationError) as err:
        fit_logistic(X, y, term_names=["intercept", "a", "b", "g=rare"])
    assert err.value.details["terms"] == ["g=rare"]
    assert err.value.details["detected_by"].startswith("diverging")


def test_well_posed_data_pass_both_paths(make_data: Sim, monkeypatch: pytest.MonkeyPatch) -> None:
    X, y = make_data(42, 3000, np.array([-0.5, 0.4, -0.3]))
    assert fit_logistic(X, y).converged
    monkeypatch.setattr(diagnostics, "LP_ALWAYS_CELLS", 0)
    monkeypatch.setattr(diagnostics, "LP_MAX_CELLS", 0)
    assert fit_logistic(X, y).converged


def test_lp_direction_satisfies_the_separation_inequalities() -> None:
    # Albert & Anderson (1984): d separates iff s_i x_i'd >= 0 for all i, not all zero.
    rng = np.random.default_rng(43)
    X = np.column_stack([np.ones(80), rng.normal(size=(80, 2))])
    s = np.where(X[:, 1] - 0.5 * X[:, 2] > 0.2, 1.0, -1.0)
    d = separating_direction(X, s)
    assert d is not None
    margins = s * (X @ d)
    assert margins.min() >= -1e-9 and margins.max() > 0
    s_mixed = np.where(rng.random(80) < 0.5, 1.0, -1.0)
    assert separating_direction(X, s_mixed) is None


def test_dummy_trap_and_zero_column_are_named(make_data: Sim) -> None:
    X, y = make_data(44, 300, np.array([0.2, 0.5]))
    level = np.arange(300) % 3
    dummies = np.column_stack([(level == k).astype(float) for k in range(3)])
    names = ["intercept", "x", "g=a", "g=b", "g=c", "zero"]
    Xd = np.column_stack([X, dummies, np.zeros(300)])
    groups = collinear_terms(Xd.T @ Xd, names)
    assert ["zero"] in groups
    assert ["intercept", "g=a", "g=b", "g=c"] in groups
    with pytest.raises(RankDeficientError) as err:
        fit_logistic(Xd, y, term_names=names)
    assert set(err.value.details["terms"]) == {"intercept", "g=a", "g=b", "g=c", "zero"}


def test_zero_weight_rows_do_not_count(make_data: Sim) -> None:
    X, y = make_data(45, 10, np.array([0.0, 1.0, 0.5]))
    w = np.r_[np.ones(3), np.zeros(7)]
    with pytest.raises(TooFewObservationsError) as err:
        fit_logistic(X, np.r_[0.0, 1.0, 0.0, y[3:]], weights=w)
    assert err.value.details == {"n_obs": 3, "n_terms": 3}
