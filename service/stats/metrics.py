"""Basic performance measures for predicted probabilities, optionally weighted.

* ``auc``: the c-statistic, the probability that a random event has a higher
  prediction than a random non-event, ties counting 1/2 (the Mann-Whitney form;
  Hanley & McNeil 1982, *Radiology* 143:29-36). With weights, pairs are weighted
  by ``w_i * w_j``. Computed in O(n log n): events and non-events sorted apart, each
  event placed among the non-events by binary search (weight below it, half of ties).
* ``brier``: ``sum w (p - y)^2 / sum w`` (Brier 1950).
* ``log_loss``: ``-sum w (y log p + (1 - y) log(1 - p)) / sum w`` with p clipped to
  [1e-15, 1 - 1e-15] (common practice).
"""

from __future__ import annotations

import numpy as np

from service.errors import DataError, NotEnoughOutcomesError

__all__ = ["auc", "brier", "log_loss"]


def _inputs(
    y: np.ndarray, p: np.ndarray, weights: np.ndarray | None
) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    y_arr = np.asarray(y, dtype=np.float64).ravel()
    p_arr = np.asarray(p, dtype=np.float64).ravel()
    w = np.ones_like(y_arr) if weights is None else np.asarray(weights, dtype=np.float64).ravel()
    if not (y_arr.shape == p_arr.shape == w.shape):
        raise DataError(
            "y, p and weights must have the same length",
            field="p",
            value=f"lengths {y_arr.size}, {p_arr.size}, {w.size}",
            remedy="pass one prediction and weight per outcome",
        )
    if not ((y_arr == 0) | (y_arr == 1)).all():
        raise DataError(
            "outcomes must be 0 or 1", field="y", value="non-binary values", remedy="code as 0/1"
        )
    if not (np.isfinite(p_arr).all() and ((p_arr >= 0) & (p_arr <= 1)).all()):
        raise DataError(
            "predictions must be probabilities in [0, 1]",
            field="p",
            value="values outside [0, 1] or non-finite",
            remedy="pass predicted probabilities",
        )
    if not (np.isfinite(w).all() and (w >= 0).all() and w.sum() > 0):
        raise DataError(
            "weights must be finite, >= 0 and not all 0",
            field="weights",
            value="invalid weights",
            remedy="pass non-negative weights",
        )
    return y_arr, p_arr, w


def auc(y: np.ndarray, p: np.ndarray, weights: np.ndarray | None = None) -> float:
    """Weighted Mann-Whitney c-statistic with ties as 1/2."""
    y_arr, p_arr, w = _inputs(y, p, weights)
    w_pos, w_neg = w * y_arr, w * (1.0 - y_arr)
    if w_pos.sum() <= 0 or w_neg.sum() <= 0:
        raise NotEnoughOutcomesError(
            "the AUC needs at least one event and one non-event",
            field="y",
            value=f"{w_pos.sum():g} events, {w_neg.sum():g} non-events",
            remedy="evaluate on data with both outcomes",
        )
    # For each event: the weight of non-events predicted lower, plus half of those tied.
    is_pos = y_arr == 1
    unweighted = weights is None
    pp, wp = _sorted(p_arr[is_pos], None if unweighted else w[is_pos])
    pn, wn = _sorted(p_arr[~is_pos], None if unweighted else w[~is_pos])
    lo = np.searchsorted(pn, pp, side="left")
    hi = np.searchsorted(pn, pp, side="right")
    if wp is None or wn is None:
        return float((lo.sum() + 0.5 * (hi - lo).sum()) / (pp.size * pn.size))
    below = np.concatenate(([0.0], np.cumsum(wn)))  # below[k]: weight of the k lowest
    wins = below[lo] + 0.5 * (below[hi] - below[lo])
    return float((wp * wins).sum() / (wp.sum() * wn.sum()))


def _sorted(values: np.ndarray, weights: np.ndarray | None) -> tuple[np.ndarray, np.ndarray | None]:
    """``values`` in ascending order, with ``weights`` (if any) in the same order."""
    if weights is None:
        return np.sort(values), None
    order = np.argsort(values)
    return values[order], weights[order]


def brier(y: np.ndarray, p: np.ndarray, weights: np.ndarray | None = None) -> float:
    """Weighted mean squared difference between prediction and outcome."""
    y_arr, p_arr, w = _inputs(y, p, weights)
    return float(np.sum(w * (p_arr - y_arr) ** 2) / w.sum())


def log_loss(y: np.ndarray, p: np.ndarray, weights: np.ndarray | None = None) -> float:
    """Weighted mean negative log-likelihood per observation."""
    y_arr, p_arr, w = _inputs(y, p, weights)
    q = np.clip(p_arr, 1e-15, 1.0 - 1e-15)
    return float(-np.sum(w * (y_arr * np.log(q) + (1.0 - y_arr) * np.log1p(-q))) / w.sum())
