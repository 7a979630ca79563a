"""``predict`` keeps ``se_eta`` finite when the quadratic form x'Vx overflows (issue 15.6).

Rows with entries near 1e200 make ``(X @ cov) * X`` overflow although sqrt(x'Vx) is far
below the largest double; the rows are computed again scaled by their largest entry. The
reference is the quadratic form in exact rational arithmetic (``fractions.Fraction``) with an
exact integer square root, independent of numpy.
"""

from __future__ import annotations

from fractions import Fraction
from math import isqrt

import numpy as np

from service.stats.predict import predict


def _exact_se(x: np.ndarray, cov: np.ndarray) -> float:
    q = sum(
        Fraction(float(x[a])) * Fraction(float(cov[a, b])) * Fraction(float(x[b]))
        for a in range(x.size)
        for b in range(x.size)
    )
    return float(Fraction(isqrt(q.numerator * 4**300 // q.denominator), 2**300))


def test_overflowing_rows_get_the_exact_standard_error() -> None:
    rng = np.random.default_rng(42)
    p = 4
    a = rng.standard_normal((p, p))
    cov = a @ a.T * 0.01 + np.eye(p) * 1e-3  # positive definite
    coef = rng.standard_normal(p) * 1e-3
    X = np.column_stack([np.ones(6), rng.standard_normal((6, p - 1))])
    X[1, 1] = 3e200  # x'Vx ~ 1e401: overflows, se ~ 1e200 does not
    X[4, 2:] = [-2e180, 5e179]
    X[5, 3] = 1e-300  # tiny entries stay as they are
    with np.errstate(over="ignore", invalid="ignore"):
        pred = predict(X, coef, cov)
    assert np.isfinite(pred.se_eta).all() and np.isfinite(pred.eta).all()
    for i in range(X.shape[0]):
        np.testing.assert_allclose(pred.se_eta[i], _exact_se(X[i], cov), rtol=1e-12)
    # the interval stays inside [0, 1] and around the probability
    assert ((pred.ci_lower <= pred.probability) & (pred.probability <= pred.ci_upper)).all()
    assert (pred.ci_lower >= 0).all() and (pred.ci_upper <= 1).all()
