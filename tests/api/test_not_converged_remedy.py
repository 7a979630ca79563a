"""The not-converged remedy names the likely cause by method, and is one that works.

Checked by doing what each remedy says on the data that stopped: for maximum likelihood on
quasi-separated data Firth's method converges (Heinze & Schemper 2002); for a fit stopped by
the iteration cap while settling, a larger cap converges. Firth's remedy does not promise
that a larger cap helps (its penalised likelihood has a maximum for every full-rank design).
"""

from __future__ import annotations

from dataclasses import replace

import numpy as np
import pytest

from service.errors import NonConvergenceError
from service.fit_checks import require_converged
from service.stats.fit import fit_logistic


def _data(seed: int, n: int = 300) -> tuple[np.ndarray, np.ndarray]:
    rng = np.random.default_rng(seed)
    x = rng.normal(size=n)
    y = (rng.random(n) < 1 / (1 + np.exp(-(0.5 + x)))).astype(float)
    return np.column_stack([np.ones(n), x]), y


def test_capped_ml_fit_remedy_works() -> None:
    X, y = _data(51)
    fit = fit_logistic(X, y, max_iter=1)
    assert not fit.converged
    with pytest.raises(NonConvergenceError) as err:
        require_converged(fit, "mle")
    remedy = err.value.remedy or ""
    assert "firth" in remedy and "max_iter" in remedy
    assert fit_logistic(X, y, max_iter=100).converged  # the larger cap it names works


def test_firth_remedy_names_the_cause_not_the_cap() -> None:
    X, y = _data(52)
    fit = replace(fit_logistic(X, y, method="firth"), converged=False, stop_reason="x")
    with pytest.raises(NonConvergenceError) as err:
        require_converged(fit, "firth")
    remedy = err.value.remedy or ""
    assert "max_iter" not in remedy
    assert "collinear" in remedy and "rescale" in remedy
