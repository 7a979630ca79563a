"""Firth's bias-reduced logistic regression (Jeffreys-prior penalised likelihood).

Firth (1993, *Biometrika* 80:27-38); for logistic regression and separation,
Heinze & Schemper (2002, *Statistics in Medicine* 21:2409-2419). The penalised
log-likelihood is

    l*(b) = l(b) + 1/2 log det I(b),     I(b) = X' W X,  W = diag(w mu (1 - mu)),

and its gradient is the hat-modified score

    U*(b) = X' (w (y - mu) + h (1/2 - mu)),   h_i = W_ii x_i' I(b)^{-1} x_i,

where ``h`` is the diagonal of the weighted hat matrix W^1/2 X I^-1 X' W^1/2.
The estimate always exists (also under complete separation) and its covariance
is the inverse information at the estimate.
"""

from __future__ import annotations

from functools import partial

import numpy as np
from scipy.linalg import solve_triangular

from .blocks import Block, BlockSource
from .lanes import LANES, lane_slices, run_lanes
from .likelihood import chunk_rows, chunks, rows

__all__ = ["half_logdet", "hat_score_adjustment"]


def half_logdet(chol_lower: np.ndarray) -> float:
    """``1/2 log det I`` from the lower Cholesky factor ``L`` of ``I`` (= sum log diag L)."""
    return float(np.log(np.diag(chol_lower)).sum())


class _HatSums:
    """One lane's share of the hat pass."""

    def __init__(self, p: int) -> None:
        self.adj = np.zeros(p)
        self.trace = 0.0

    def add(self, block: Block, coef: np.ndarray, linv_t: np.ndarray) -> None:
        for b in chunks(block, chunk_rows(coef.shape[0])):
            eta = np.dot(b.X, coef)
            if b.offset is not None:
                eta += b.offset
            e = np.exp(-np.abs(eta))
            d = 1.0 + e
            mu = np.where(eta >= 0, 1.0, e)
            mu /= d
            var = e / (d * d)
            if b.weights is not None:
                var *= b.weights
            Z = np.dot(b.X, linv_t)  # rows L^-1 x_i, (m, p)
            h = var * np.einsum("ij,ij->i", Z, Z)
            self.adj += np.dot(b.X.T, h * (0.5 - mu))
            self.trace += float(h.sum())


def hat_score_adjustment(
    blocks: BlockSource, coef: np.ndarray, chol_lower: np.ndarray
) -> tuple[np.ndarray, float]:
    """Second pass at ``coef``: ``sum_i x_i h_i (1/2 - mu_i)`` (p,) and ``sum_i h_i`` (= p).

    ``chol_lower`` is the lower Cholesky factor ``L`` of ``I(coef)``; ``h_i`` is
    ``W_ii * ||L^{-1} x_i||^2``, computed as ``X L^{-T}`` by matrix products on the two lanes
    of :mod:`service.stats.lanes`.
    """
    p = coef.shape[0]
    linv_t = np.ascontiguousarray(
        solve_triangular(chol_lower, np.eye(p), lower=True, check_finite=False).T
    )
    lanes = [_HatSums(p) for _ in range(LANES)]
    for block in blocks():
        parts = lane_slices(block.X.shape[0], chunk_rows(coef.shape[0]))
        run_lanes(
            [partial(lanes[k].add, rows(block, sl), coef, linv_t) for k, sl in enumerate(parts)],
            n_terms=p,
        )
    return lanes[0].adj + lanes[1].adj, lanes[0].trace + lanes[1].trace
