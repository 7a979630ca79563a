"""metrics against scikit-learn's implementations."""

from __future__ import annotations

import numpy as np
import pytest
from sklearn.metrics import brier_score_loss, roc_auc_score
from sklearn.metrics import log_loss as sk_log_loss

from service.errors import NotEnoughOutcomesError
from service.stats.metrics import auc, brier, log_loss


@pytest.mark.parametrize("weighted", [False, True])
def test_against_scikit_learn_with_ties(weighted: bool) -> None:
    # References: sklearn.metrics.roc_auc_score / brier_score_loss / log_loss (sample_weight).
    rng = np.random.default_rng(21)
    n = 3000
    p = np.round(rng.random(n), 2)  # many ties
    y = (rng.random(n) < p).astype(float)
    w = rng.random(n) * 3 if weighted else None
    assert auc(y, p, w) == pytest.approx(roc_auc_score(y, p, sample_weight=w), rel=1e-12)
    assert brier(y, p, w) == pytest.approx(brier_score_loss(y, p, sample_weight=w), rel=1e-12)
    q = np.clip(p, 0.01, 0.99)
    assert log_loss(y, q, w) == pytest.approx(sk_log_loss(y, q, sample_weight=w), rel=1e-12)


def test_auc_of_perfect_and_constant_predictions() -> None:
    # Common practice: perfect ranking gives 1, a constant prediction gives 1/2.
    y = np.array([0, 0, 1, 1.0])
    assert auc(y, np.array([0.1, 0.2, 0.8, 0.9])) == 1.0
    assert auc(y, np.full(4, 0.3)) == 0.5
    with pytest.raises(NotEnoughOutcomesError):
        auc(np.zeros(3), np.full(3, 0.2))
