"""Log-likelihoods and scores at several coefficient vectors in one pass over the data.

For ``C`` (p, k), a chunk's linear predictors are ``E = X C + offset`` (m, k), one column
per coefficient vector, and with ``M = expit(E)`` and case weights ``w``

    loglik_j = sum_i w_i (y_i E_ij - log(1 + exp(E_ij)))        (k,)
    score    = X' (w * (y - M))                                  (p, k)

with the tail-accurate forms of :func:`service.stats.likelihood.loglik_pass`. X is read once
and its two products are matrix-matrix (``dgemm``) instead of k matrix-vector products, so
k chord refits (:mod:`service.stats.drop_terms`) cost little more than one.
"""

from __future__ import annotations

from functools import partial

import numpy as np

from .blocks import Block, BlockSource
from .lanes import LANES, lane_slices, run_lanes
from .likelihood import EXTREME_ETA, chunk_rows, chunks, rows

__all__ = ["score_pass"]


class _ScoreSums:
    """One lane's share of a multi-vector score pass."""

    def __init__(self, p: int, k: int) -> None:
        self.loglik = np.zeros(k)
        self.score = np.zeros((p, k))
        self.n_extreme = np.zeros(k, dtype=np.int64)
        self.size = chunk_rows(p)

    def add(self, block: Block, C: np.ndarray) -> None:
        for b in chunks(block, self.size):
            self._chunk(b, C)

    def _chunk(self, b: Block, C: np.ndarray) -> None:
        X, w = b.X, b.weights
        y = b.y[:, None]
        E = np.dot(X, C)
        if b.offset is not None:
            E += b.offset[:, None]
        a = np.abs(E)
        e = np.exp(np.negative(a))
        M = np.where(E >= 0, 1.0, e)
        M /= 1.0 + e
        R = y - M
        lp = y * E
        lp -= np.maximum(E, 0.0)
        lp -= np.log1p(e)
        if w is None:
            self.loglik += lp.sum(axis=0)
        else:
            self.loglik += np.dot(w, lp)
            R *= w[:, None]
        self.score += np.dot(X.T, R)
        self.n_extreme += np.count_nonzero(a > EXTREME_ETA, axis=0)


def score_pass(blocks: BlockSource, C: np.ndarray) -> tuple[np.ndarray, np.ndarray, np.ndarray]:
    """``(loglik (k,), score (p, k), n_extreme (k,))`` at the columns of ``C`` (p, k).

    Column ``j`` equals ``loglik_pass(blocks, C[:, j], want_info=False)``'s log-likelihood
    and score up to rounding (tests/stats/test_score_pass.py).
    """
    p, k = C.shape
    lanes = [_ScoreSums(p, k) for _ in range(LANES)]
    for block in blocks():
        parts = lane_slices(block.X.shape[0], chunk_rows(p))
        tasks = [partial(lanes[i].add, rows(block, sl), C) for i, sl in enumerate(parts)]
        run_lanes(tasks, n_terms=p)
    a, b = lanes
    return a.loglik + b.loglik, a.score + b.score, a.n_extreme + b.n_extreme
