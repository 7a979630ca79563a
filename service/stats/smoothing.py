"""Loess smoother for flexible calibration curves (observed event rate against predicted risk).

Local polynomial regression (Cleveland 1979; Cleveland & Devlin 1988): at an evaluation
point x0 the fitted value is the intercept of a weighted least-squares polynomial of degree
1 or 2 in (x - x0), with tricube weights ``(1 - (|x - x0| / h)^3)^3`` for ``|x - x0| < h``
where ``h`` is the distance from x0 to its ``q``-th nearest observation and
``q = floor(span * n)`` (``span * sum(weights)`` with frequency weights). No robustness
iterations are made (outcomes are 0/1; downweighting "outliers" would remove events).

Computation, without loops over rows:

* records are sorted by x and aggregated — by distinct x value when there are at most
  ``max_points`` of them (then the fit is *exact* loess: tied x values enter local least
  squares only through their summed weight and mean y) or else into at most
  ``max_points`` consecutive groups cut at the union of ``max_points // 2`` equal-weight
  and ``max_points // 2`` equal-width boundaries (so sparse tails stay finely resolved),
  each represented by its weighted mean x, mean y and summed weight (a *binned
  approximation*, evaluated at the group means and the two extreme records; the result
  says which was used);
* ``h`` for all evaluation points at once by bisection on the cumulative weight inside
  [x0 - h, x0 + h] (binary search over the sorted aggregate points);
* the local fits as a batch of small normal-equation systems (pseudo-inverse, so windows
  with too few distinct x values degrade gracefully);
* values at the records by linear interpolation between aggregate points.

Flexible calibration (Austin & Steyerberg, Stat Med 2019): loess of y on predicted p, and
with d_i = |curve(p_i) - p_i|: ICI = weighted mean of d, E50 / E90 its median and 90th
percentile, Emax its maximum.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from service.errors import SpecError
from service.stats._outcome_arrays import (
    FloatArray,
    as_outcomes,
    as_probabilities,
    as_weights,
    weighted_sum,
)

__all__ = ["FlexibleCalibration", "LoessCurve", "flexible_calibration", "loess"]


@dataclass(frozen=True)
class LoessCurve:
    """A loess curve: fitted values ``fitted`` (k,) at sorted points ``x`` (k,)."""

    x: FloatArray
    fitted: FloatArray
    span: float
    degree: int
    exact: bool
    n_obs: int
    method: str

    def at(self, x: ArrayLike) -> FloatArray:
        """Curve at ``x`` (linear interpolation between points; constant beyond the ends)."""
        return np.interp(np.asarray(x, dtype=np.float64), self.x, self.fitted)


def _aggregate(
    xs: FloatArray, ys: FloatArray, ws: FloatArray, max_points: int
) -> tuple[FloatArray, FloatArray, FloatArray, bool]:
    """Aggregate sorted (x, y, w) by distinct x, or into ``max_points`` equal-weight groups."""
    starts = np.flatnonzero(np.r_[True, xs[1:] != xs[:-1]])
    exact = starts.shape[0] <= max_points
    if not exact:
        half = max(max_points // 2, 1)
        cw = np.cumsum(ws) - ws  # weight strictly before each record
        by_weight = np.minimum((cw / ws.sum() * half).astype(np.int64), half - 1)
        span_x = max(xs[-1] - xs[0], np.finfo(float).tiny)
        by_width = np.minimum(((xs - xs[0]) / span_x * half).astype(np.int64), half - 1)
        new = (by_weight[1:] != by_weight[:-1]) | (by_width[1:] != by_width[:-1])
        starts = np.flatnonzero(np.r_[True, new])
    wa = np.add.reduceat(ws, starts)
    keep = wa > 0
    wa_safe = np.where(keep, wa, 1.0)
    xa = np.add.reduceat(ws * xs, starts) / wa_safe
    ya = np.add.reduceat(ws * ys, starts) / wa_safe
    if not exact:  # zero-weight groups carry no information
        xa, ya, wa = xa[keep], ya[keep], wa[keep]
    else:
        xa = np.where(keep, xa, xs[starts])
    return xa, ya, wa, exact


def _bandwidths(
    xa: FloatArray, wa: FloatArray, x0: FloatArray, q: float, iters: int = 64
) -> FloatArray:
    """Smallest h with aggregate weight inside [x0 - h, x0 + h] >= q, for every x0 (k,)."""
    cw = np.r_[0.0, np.cumsum(wa)]
    lo = np.zeros_like(x0)
    hi = np.full_like(x0, max(xa[-1] - xa[0], np.finfo(float).tiny) * 1.000001)
    for _ in range(iters):  # loop over bisection steps, vectorised over points
        mid = 0.5 * (lo + hi)
        inside = (
            cw[np.searchsorted(xa, x0 + mid, "right")] - cw[np.searchsorted(xa, x0 - mid, "left")]
        )
        enough = inside >= q * (1 - 1e-12)
        hi, lo = np.where(enough, mid, hi), np.where(enough, lo, mid)
    return hi


def _local_fits(
    xa: FloatArray, ya: FloatArray, wa: FloatArray, x0: FloatArray, h: FloatArray, degree: int
) -> FloatArray:
    """Local polynomial fits at evaluation points x0 (k,) with bandwidths h (k,)."""
    d = xa[None, :] - x0[:, None]  # (k, m): row = evaluation point
    # h = 0 when the point's own tie run holds the span (e.g. one distinct prediction):
    # the tied points get weight 1, every other point 0 (no 0/0)
    h_pos = np.where(h > 0, h, np.finfo(np.float64).tiny)
    u = np.minimum(np.abs(d) / h_pos[:, None], 1.0)
    K = wa[None, :] * (1.0 - u**3) ** 3
    m = 2 * degree + 1
    S = np.empty((x0.shape[0], m))  # S[:, k] = sum_j K_j d_j^k
    T = np.empty((x0.shape[0], degree + 1))  # T[:, k] = sum_j K_j d_j^k y_j
    Kp = K
    for k in range(m):  # loop over polynomial powers only
        if k:
            Kp = Kp * d
        S[:, k] = Kp.sum(axis=1)
        if k <= degree:
            T[:, k] = Kp @ ya
    idx = np.arange(degree + 1)
    A = S[:, idx[:, None] + idx[None, :]]
    b = T
    coef = np.einsum("kij,kj->ki", np.linalg.pinv(A), b)
    return np.asarray(coef[:, 0], dtype=np.float64)


def loess(
    x: ArrayLike,
    y: ArrayLike,
    *,
    weights: ArrayLike | None = None,
    span: float = 0.75,
    degree: int = 2,
    max_points: int = 1000,
    presorted: bool = False,
) -> LoessCurve:
    """Loess of ``y`` (n,) on ``x`` (n,) (inputs assumed validated and finite).

    ``presorted=True`` promises ``x`` is already in ascending order (saves a sort).
    """
    if not 0.0 < span <= 1.0:
        raise SpecError(
            "loess span must be in (0, 1]", field="span", value=span, remedy="use e.g. 0.75"
        )
    if degree not in (1, 2):
        raise SpecError(
            "loess degree must be 1 or 2",
            field="degree",
            value=degree,
            remedy="use 1 (local linear) or 2 (local quadratic)",
        )
    xv, yv = np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64)
    wv = np.ones_like(xv) if weights is None else np.asarray(weights, dtype=np.float64)
    if not presorted:
        order = np.argsort(xv)
        xv, yv, wv = xv[order], yv[order], wv[order]
    xa, ya, wa, exact = _aggregate(xv, yv, wv, max_points)
    q = float(np.floor(span * xv.shape[0] + 1e-10)) if weights is None else span * wa.sum()
    q = max(q, float(wa.min()))
    # binned: also evaluate at the extreme records, so the curve spans the whole range
    x0 = xa if exact else np.unique(np.r_[xv[0], xa, xv[-1]])
    fitted = _local_fits(xa, ya, wa, x0, _bandwidths(xa, wa, x0, q), degree)
    how = (
        "exact on distinct values"
        if exact
        else f"binned approximation: {xa.shape[0]} groups (equal-weight and equal-width "
        "cuts) at their mean, "
        "evaluated there and at the extreme records"
    )
    method = (
        f"loess, degree {degree}, span {span:g}, tricube weights, no robustness "
        f"iterations; {how}; linear interpolation between points"
    )
    return LoessCurve(x0, fitted, span, degree, exact, int(xv.shape[0]), method)


@dataclass(frozen=True)
class FlexibleCalibration:
    """Loess calibration curve on a grid, and ICI / E50 / E90 / Emax."""

    ici: float
    e50: float
    e90: float
    emax: float
    curve_predicted: FloatArray  # (k,) grid of predicted risk
    curve_observed: FloatArray  # (k,) smoothed observed rate at the grid
    smoother: str
    n_obs: int
    n_events: float


def _weighted_quantile(v: FloatArray, w: FloatArray | None, q: float) -> float:
    if w is None:
        return float(np.quantile(v, q))
    o = np.argsort(v)
    cw = np.cumsum(w[o])
    return float(v[o][min(int(np.searchsorted(cw, q * cw[-1])), v.shape[0] - 1)])


def flexible_calibration_sorted(
    ps: FloatArray,
    ys: FloatArray,
    ws: FloatArray | None,
    *,
    span: float,
    degree: int,
    max_points: int,
    grid: int,
) -> FlexibleCalibration:
    curve = loess(
        ps, ys, weights=ws, span=span, degree=degree, max_points=max_points, presorted=True
    )
    d = np.abs(curve.at(ps) - ps)
    sw = float(ps.shape[0]) if ws is None else float(ws.sum())
    xg = np.linspace(ps[0], ps[-1], grid)
    return FlexibleCalibration(
        weighted_sum(d, ws) / sw,
        _weighted_quantile(d, ws, 0.5),
        _weighted_quantile(d, ws, 0.9),
        float(d.max()),
        xg,
        curve.at(xg),
        curve.method + "; y smoothed on p (probability scale)",
        int(ps.shape[0]),
        weighted_sum(ys, ws),
    )


def flexible_calibration(
    y: ArrayLike,
    p: ArrayLike,
    *,
    weights: ArrayLike | None = None,
    span: float = 0.75,
    degree: int = 2,
    max_points: int = 1000,
    grid: int = 101,
) -> FlexibleCalibration:
    """Loess calibration curve and ICI, E50, E90, Emax (Austin & Steyerberg 2019)."""
    yy = as_outcomes(y)
    pp = as_probabilities(p, yy.shape[0])
    w = as_weights(weights, yy.shape[0])
    o = np.argsort(pp)
    ps, ys, ws = pp[o], yy[o], None if w is None else w[o]
    return flexible_calibration_sorted(
        ps, ys, ws, span=span, degree=degree, max_points=max_points, grid=grid
    )
