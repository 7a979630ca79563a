"""AUC and DeLong variance: checks against scikit-learn, a published example and brute force."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.metrics import roc_auc_score

from service.errors import DataError
from service.stats.discrimination import auc_delong, auc_difference


def _hanley_mcneil() -> tuple[np.ndarray, np.ndarray]:
    # Hanley & McNeil, Radiology 1982, Table 1: 5-point ratings of CT images
    # (counts quoted from memory): normals 33, 6, 6, 11, 2; abnormals 3, 2, 2, 11, 33.
    normals = np.repeat(np.arange(1, 6), [33, 6, 6, 11, 2])
    abnormals = np.repeat(np.arange(1, 6), [3, 2, 2, 11, 33])
    y = np.r_[np.zeros(normals.size), np.ones(abnormals.size)]
    return y, np.r_[normals, abnormals].astype(float)


def _direct_components(y: np.ndarray, s: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """Structural components by the full m x n comparison matrix (DeLong et al. 1988, eq. 2)."""
    x, z = s[y == 1], s[y == 0]
    psi = (x[:, None] > z[None, :]) + 0.5 * (x[:, None] == z[None, :])
    return psi.mean(axis=1), psi.mean(axis=0)


def test_hanley_mcneil_table1_auc_and_delong_se() -> None:
    y, s = _hanley_mcneil()
    res = auc_delong(y, s)
    # Published AUC 0.893 (Hanley & McNeil 1982, quoted from memory), to its 3 decimals.
    assert res.auc == pytest.approx(0.893, abs=5e-4)
    v10, v01 = _direct_components(y, s)
    se_direct = np.sqrt(v10.var(ddof=1) / v10.size + v01.var(ddof=1) / v01.size)
    assert res.std_error == pytest.approx(se_direct, rel=1e-12)
    # Their exponential-approximation SE was 0.032 (quoted from memory); DeLong is close.
    assert res.std_error == pytest.approx(0.032, abs=0.003)
    assert (res.n_events, res.n_non_events, res.n_obs) == (51, 58, 109)
    assert res.ci_lower < res.auc < res.ci_upper < 1.0
    assert "logit" in res.ci_method


@pytest.mark.parametrize("seed", [0, 1, 2])
def test_auc_equals_sklearn_with_ties_and_weights(seed: int) -> None:
    rng = np.random.default_rng(seed)
    n = 500
    y = rng.integers(0, 2, n)
    s = np.round(rng.normal(size=n) + 0.8 * y, 1)  # rounding creates ties
    w = rng.integers(1, 4, n).astype(float)
    # scikit-learn roc_auc_score (ties count 1/2; sample_weight as frequency weights)
    assert auc_delong(y, s).auc == pytest.approx(roc_auc_score(y, s), abs=1e-12)
    assert auc_delong(y, s, weights=w).auc == pytest.approx(
        roc_auc_score(y, s, sample_weight=w), abs=1e-12
    )


def test_integer_weights_equal_expanded_rows() -> None:
    # Frequency-weight semantics (definition): weight k == the record repeated k times.
    rng = np.random.default_rng(5)
    n = 200
    y, s = rng.integers(0, 2, n), rng.normal(size=n)
    w = rng.integers(1, 4, n)
    a = auc_delong(y, s, weights=w)
    b = auc_delong(np.repeat(y, w), np.repeat(s, w))
    assert a.auc == pytest.approx(b.auc, abs=1e-12)
    assert a.std_error == pytest.approx(b.std_error, rel=1e-10)


def test_paired_difference_matches_direct_covariance() -> None:
    rng = np.random.default_rng(7)
    n = 400
    y = rng.integers(0, 2, n)
    sa = rng.normal(size=n) + y
    sb = sa + rng.normal(scale=0.7, size=n)
    d = auc_difference(y, sa, sb)
    a10, a01 = _direct_components(y, sa)
    b10, b01 = _direct_components(y, sb)
    # DeLong et al. 1988: var(b - a) from the covariance of the structural components.
    var = (np.var(b10 - a10, ddof=1) / a10.size) + (np.var(b01 - a01, ddof=1) / a01.size)
    assert d.std_error == pytest.approx(np.sqrt(var), rel=1e-10)
    assert d.difference == pytest.approx(roc_auc_score(y, sb) - roc_auc_score(y, sa), abs=1e-12)
    assert d.ci_lower < d.difference < d.ci_upper
    same = auc_difference(y, sa, sa)
    assert same.difference == 0.0 and same.std_error == 0.0 and same.p_value == 1.0


def test_single_class_is_a_clear_error() -> None:
    with pytest.raises(DataError, match="two events and two non-events") as exc:
        auc_delong(np.zeros(10), np.linspace(0, 1, 10))
    assert exc.value.field == "y" and exc.value.remedy
    with pytest.raises(DataError) as exc2:
        auc_delong([0, 1, 2], [0.1, 0.2, 0.3])
    assert exc2.value.field == "y[2]"
