"""AUC (c-statistic) with the DeLong variance, and the paired DeLong difference of two AUCs.

Placement values (DeLong, DeLong & Clarke-Pearson, Biometrics 1988). For events
x_1..x_m and non-events y_1..y_n with psi(a, b) = 1 if a > b, 1/2 if a = b, 0 otherwise::

    V10_i = (1/n) sum_j psi(x_i, y_j)        V01_j = (1/m) sum_i psi(x_i, y_j)
    AUC   = mean_i V10_i = mean_j V01_j
    var(AUC) = S10 / m + S01 / n,   S10 = sample variance of V10, S01 = of V01

The placement values come from one sort of all scores and cumulative sums over runs of
tied scores (the non-event weight below / tied with each event), which is the
O(N log N) midrank algorithm of Sun & Xu (IEEE Signal Processing Letters 2014) written with
cumulative weights instead of ranks, so frequency weights are supported (unit weights
give the textbook DeLong figures).

The interval is a Wald interval on the logit scale,
``logit(AUC) +/- z * SE / (AUC (1 - AUC))`` back-transformed, which stays inside (0, 1)
(a common choice, e.g. Pepe, *The Statistical Evaluation of Medical Tests*, 2003).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike
from scipy import special, stats

from service.errors import DataError
from service.stats._outcome_arrays import FloatArray, as_outcomes, as_probabilities, as_weights

__all__ = ["AucDifference", "AucResult", "auc_delong", "auc_difference"]

CI_METHOD = "DeLong (1988) variance; Wald interval on the logit scale"


@dataclass(frozen=True)
class AucResult:
    """AUC with its DeLong standard error and interval, and the counts behind it."""

    auc: float
    std_error: float
    ci_lower: float
    ci_upper: float
    confidence_level: float
    ci_method: str
    n_obs: int
    n_events: float
    n_non_events: float


@dataclass(frozen=True)
class AucDifference:
    """Paired difference ``auc_b - auc_a`` on the same records (DeLong 1988 covariance)."""

    auc_a: float
    auc_b: float
    difference: float
    std_error: float
    ci_lower: float
    ci_upper: float
    z: float
    p_value: float
    confidence_level: float
    ci_method: str
    n_obs: int
    n_events: float
    n_non_events: float


def _placements(
    score: FloatArray, event: np.ndarray, weights: FloatArray, order: np.ndarray | None = None
) -> tuple[FloatArray, FloatArray, FloatArray, FloatArray]:
    """Placement values V10 (one per event) and V01 (one per non-event) and their weights.

    One sort of all scores (``order``, an argsort of ``score``, when the caller has one);
    per run of tied scores, the non-event weight below the run plus half the non-event
    weight in it gives V10 (and symmetrically V01).
    """
    order = np.argsort(score) if order is None else order
    ss, ev, ww = score[order], event[order], weights[order]
    new_run = np.r_[True, ss[1:] != ss[:-1]]
    starts = np.flatnonzero(new_run)
    run = np.cumsum(new_run) - 1
    pos_w = np.add.reduceat(np.where(ev, ww, 0.0), starts)
    neg_w = np.add.reduceat(np.where(ev, 0.0, ww), starts)
    wp, wn = pos_w.sum(), neg_w.sum()
    v10_run = (np.cumsum(neg_w) - 0.5 * neg_w) / wn
    v01_run = (wp - np.cumsum(pos_w) + 0.5 * pos_w) / wp
    placed = np.empty_like(ss)  # per record, in the caller's order (pairs records across scores)
    placed[order] = np.where(ev, v10_run[run], v01_run[run])
    return placed[event], weights[event], placed[~event], weights[~event]


def _prepare(
    y: ArrayLike, scores: list[ArrayLike], weights: ArrayLike | None
) -> tuple[np.ndarray, list[FloatArray], FloatArray]:
    yy = as_outcomes(y)
    n = yy.shape[0]
    ss = [_as_scores(s, n, f"p[{k}]" if len(scores) > 1 else "p") for k, s in enumerate(scores)]
    w = as_weights(weights, n)
    w = np.ones(n) if w is None else w
    event = yy == 1.0
    n_ev, n_non = float(w[event].sum()), float(w[~event].sum())
    if n_ev <= 1.0 or n_non <= 1.0:
        raise DataError(
            "the AUC and its DeLong variance need at least two events and two non-events",
            field="y",
            value={"events": n_ev, "non_events": n_non},
            remedy="widen the window until both outcomes occur more than once",
        )
    return event, ss, w


def _as_scores(s: ArrayLike, n: int, field: str) -> FloatArray:
    """Scores for ranking: any finite reals (probabilities or linear predictors), shape (n,)."""
    arr = np.asarray(s, dtype=np.float64)
    if arr.shape == (n,) and np.isfinite(arr).all():
        return arr
    return as_probabilities(arr, n, field)  # raises the shaped / non-finite error


def _wvar(
    v: FloatArray,
    w: FloatArray,
    mean: float,
    v2: FloatArray | None = None,
    mean2: float | None = None,
) -> float:
    """Frequency-weighted sample (co)variance with divisor sum(w) - 1."""
    other = v if v2 is None else v2
    m2 = mean if mean2 is None else mean2
    return float(w @ ((v - mean) * (other - m2)) / (w.sum() - 1.0))


def _logit_ci(auc: float, se: float, z: float) -> tuple[float, float]:
    if not 0.0 < auc < 1.0 or se == 0.0:
        return auc, auc
    half = z * se / (auc * (1.0 - auc))
    centre = float(special.logit(auc))
    lo, hi = float(special.expit(centre - half)), float(special.expit(centre + half))
    return min(lo, auc), max(hi, auc)  # expit(logit(auc)) may differ from auc by an ulp


def auc_delong(
    y: ArrayLike,
    p: ArrayLike,
    *,
    weights: ArrayLike | None = None,
    confidence_level: float = 0.95,
    order: np.ndarray | None = None,
) -> AucResult:
    """AUC of scores ``p`` (n,) for outcomes ``y`` (n,) with DeLong SE and logit-scale interval.

    ``order``: ``np.argsort(p)`` if the caller has already computed it (saves the sort).
    """
    event, (s,), w = _prepare(y, [p], weights)
    v10, wx, v01, wy = _placements(s, event, w, order)
    auc = float(wx @ v10 / wx.sum())
    var = _wvar(v10, wx, auc) / wx.sum() + _wvar(v01, wy, auc) / wy.sum()
    se = float(np.sqrt(max(var, 0.0)))
    z = float(stats.norm.ppf(0.5 + confidence_level / 2.0))
    lo, hi = _logit_ci(auc, se, z)
    return AucResult(
        auc,
        se,
        lo,
        hi,
        confidence_level,
        CI_METHOD,
        int(s.shape[0]),
        float(wx.sum()),
        float(wy.sum()),
    )


def auc_difference(
    y: ArrayLike,
    p_a: ArrayLike,
    p_b: ArrayLike,
    *,
    weights: ArrayLike | None = None,
    confidence_level: float = 0.95,
) -> AucDifference:
    """Paired ``AUC(p_b) - AUC(p_a)`` with DeLong covariance; Wald interval, two-sided z test."""
    event, (sa, sb), w = _prepare(y, [p_a, p_b], weights)
    a10, wx, a01, wy = _placements(sa, event, w)
    b10, _, b01, _ = _placements(sb, event, w)
    m, n = wx.sum(), wy.sum()
    auc_a, auc_b = float(wx @ a10 / m), float(wx @ b10 / m)
    var = (
        _wvar(a10, wx, auc_a) + _wvar(b10, wx, auc_b) - 2 * _wvar(a10, wx, auc_a, b10, auc_b)
    ) / m + (
        _wvar(a01, wy, auc_a) + _wvar(b01, wy, auc_b) - 2 * _wvar(a01, wy, auc_a, b01, auc_b)
    ) / n
    se = float(np.sqrt(max(var, 0.0)))
    diff = auc_b - auc_a
    zq = float(stats.norm.ppf(0.5 + confidence_level / 2.0))
    zstat = diff / se if se > 0 else 0.0
    return AucDifference(
        auc_a,
        auc_b,
        diff,
        se,
        diff - zq * se,
        diff + zq * se,
        zstat,
        float(2.0 * stats.norm.sf(abs(zstat))),
        confidence_level,
        "DeLong (1988) paired covariance; Wald interval on the difference",
        int(sa.shape[0]),
        float(m),
        float(n),
    )
