"""Centring columns that sit far from zero: an exact reparametrisation of the fit.

A column shifted by a large constant (a calendar year, an id-like offset, a measurement
varying only in its third decimal) makes ``X'WX`` ill-conditioned: with mean ``m_j`` and
standard deviation ``s_j`` its condition number grows like ``(m_j / s_j)^2``, Newton's steps lose
that many digits, and beyond ``(m_j / s_j)^2 ~ 1e16`` the cross-product no longer holds the
column's spread at all. With an intercept the model is unchanged by fitting on
``x_j - c_j`` instead (every non-intercept column ``j``, any constants ``c_j``):

    eta = b0' + sum_j b_j (x_j - c_j)    =>    b0 = b0' - sum_j c_j b_j,  b_j unchanged,

i.e. ``b = A b'`` with ``A`` the identity but for row ``intercept``, ``A[0, j] = -c_j``; then
``cov(b) = A cov(b') A'``. The log-likelihood is the same function; Firth's penalty
``1/2 log det I`` changes by ``log |det A| = 0`` (``A`` is unit triangular), and the ridge
penalty does not involve the intercept, so every method's maximum, (penalised) log-likelihood
and null model are the same. The fit centres a column at its weighted mean (from the first
scan) when ``|m_j| > CENTRE_RATIO * s_j`` (common practice: centre covariates before fitting
when they are far from zero), and then scans once more; other data pay nothing.
"""

from __future__ import annotations

from collections.abc import Iterator

import numpy as np

from .blocks import Block, BlockSource
from .likelihood import DataSummary

__all__ = ["CENTRE_RATIO", "column_shifts", "shift_matrix", "shifted_blocks"]

CENTRE_RATIO = 10.0  # |mean| / sd beyond which a column is centred (two digits lost otherwise)


def column_shifts(summary: DataSummary, intercept_index: int | None) -> np.ndarray | None:
    """Per-column constants to subtract (p,), 0 for the intercept and for columns near zero;
    None when no column needs centring or there is no intercept to absorb the shift."""
    if intercept_index is None or not summary.sum_weights > 0:
        return None
    mean = summary.xtw / summary.sum_weights
    # the spread from the scan's own sums; cancellation can only make it look smaller
    var = np.clip(summary.sum_wx2 / summary.sum_weights - mean**2, 0.0, None)
    far = mean**2 > CENTRE_RATIO**2 * var
    far[intercept_index] = False
    if not far.any() or not np.all(np.isfinite(mean)):
        return None
    return np.where(far, mean, 0.0)


def shifted_blocks(blocks: BlockSource, shift: np.ndarray) -> BlockSource:
    """``blocks`` with ``X - shift`` (a copy of each block's X; y, weights, offset as they are)."""

    def source() -> Iterator[Block]:
        for b in blocks():
            yield Block(b.X - shift, b.y, b.weights, b.offset)

    return source


def shift_matrix(shift: np.ndarray, intercept_index: int) -> np.ndarray:
    """``A`` (p, p) with ``b = A b'`` (module docstring)."""
    A = np.eye(shift.shape[0])
    A[intercept_index, :] -= shift
    A[intercept_index, intercept_index] = 1.0
    return A
