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
from .likelihood import chunk_rows, chunks, rows

__all__ = ["score_pass"]


class _ScoreSums:
    """One lane's share of a multi-vector score pass."""

    def __init__(self, p: int, k: int) -> None:
        self.loglik = np.zeros(k)
        self.score = np.zeros((p, k))
        # a chunk's (m, k) temporaries stay at chunk_rows(p) * 8 bytes or less, as in
        # loglik_pass: larger ones come from fresh pages of the allocator each time
        self.size = max(256, chunk_rows(p) // (1 << max(k - 1, 0).bit_length()))
        self._ones = np.ones(self.size)

    def add(self, block: Block, C: np.ndarray) -> None:
        for b in chunks(block, self.size):
            self._chunk(b, C)

    def _chunk(self, b: Block, C: np.ndarray) -> None:
        X, w = b.X, b.weights
        y = b.y[:, None]
        E = np.dot(X, C)
        if b.offset is not None:
            E += b.offset[:, None]
        e = np.abs(E)
        np.negative(e, out=e)
        np.exp(e, out=e)  # exp(-|E|)
        M = np.negative(E)  # expit(E) = 1 / (1 + exp(-E)); exp(-E) = inf gives 0, as it should
        with np.errstate(over="ignore"):
            np.exp(M, out=M)
        M += 1.0
        np.reciprocal(M, out=M)
        R = np.subtract(y, M, out=M)
        lp = y * E
        lp -= np.maximum(E, 0.0)
        lp -= np.log1p(e)
        if w is None:  # column sums as a product: numpy's axis-0 sum of an (m, k) array is slow
            self.loglik += np.dot(self._ones[: X.shape[0]], lp)
        else:
            self.loglik += np.dot(w, lp)
            R *= w[:, None]
        self.score += np.dot(X.T, R)


def score_pass(blocks: BlockSource, C: np.ndarray) -> tuple[np.ndarray, np.ndarray]:
    """``(loglik (k,), score (p, k))`` at the columns of ``C`` (p, k).

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
    return a.loglik + b.loglik, a.score + b.score
