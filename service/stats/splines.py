"""Natural (restricted) cubic splines: linear beyond the outer knots.

For knots ``t_1 < ... < t_k`` (k >= 3) the basis is ``x`` itself and, for
``j = 1 .. k-2``,

    s_j(x) = [ (x - t_j)_+^3
               - (x - t_{k-1})_+^3 (t_k - t_j) / (t_k - t_{k-1})
               + (x - t_k)_+^3     (t_{k-1} - t_j) / (t_k - t_{k-1}) ] / (t_k - t_1)^2

(Stone & Koo 1985; Harrell, *Regression Modeling Strategies*, 2nd ed., sec. 2.4.5,
eq. 2.25; the division by ``(t_k - t_1)^2`` puts the terms on the scale of x).
Each ``s_j`` is cubic between knots and linear beyond ``t_k``, so the fitted
curve is linear in both tails and uses k - 1 degrees of freedom.

Default knot positions are the quantiles of Harrell's Table 2.3 (sec. 2.4.6,
quoted from memory), chosen by the number of knots.
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np

__all__ = ["HARRELL_QUANTILES", "knots_at_quantiles", "spline_basis"]

HARRELL_QUANTILES: dict[int, tuple[float, ...]] = {
    3: (0.10, 0.50, 0.90),
    4: (0.05, 0.35, 0.65, 0.95),
    5: (0.05, 0.275, 0.50, 0.725, 0.95),
    6: (0.05, 0.23, 0.41, 0.59, 0.77, 0.95),
    7: (0.025, 0.1833, 0.3417, 0.50, 0.6583, 0.8167, 0.975),
}


def knots_at_quantiles(x: np.ndarray, quantiles: Sequence[float]) -> tuple[float, ...]:
    """Distinct knots at the given sample quantiles of ``x`` (numpy's linear interpolation)."""
    q = np.quantile(np.asarray(x, dtype=np.float64), np.asarray(quantiles, dtype=np.float64))
    return tuple(float(v) for v in np.unique(q))


def spline_basis(x: np.ndarray, knots: Sequence[float]) -> np.ndarray:
    """Non-linear spline columns ``s_1 .. s_{k-2}`` (n, k-2) for values ``x`` (n,)."""
    t = np.asarray(knots, dtype=np.float64)
    k = t.size
    x = np.asarray(x, dtype=np.float64)
    out = np.empty((x.shape[0], k - 2))
    last, penult = t[-1], t[-2]
    tail_last = np.clip(x - last, 0.0, None) ** 3
    tail_penult = np.clip(x - penult, 0.0, None) ** 3
    norm = (last - t[0]) ** 2
    for j in range(k - 2):
        out[:, j] = (
            np.clip(x - t[j], 0.0, None) ** 3
            - tail_penult * (last - t[j]) / (last - penult)
            + tail_last * (penult - t[j]) / (last - penult)
        ) / norm
    return out
