"""Binomial log-likelihood with logit link, summed over blocks of rows.

For coefficients ``coef`` (p,), a block's linear predictor is
``eta = X @ coef + offset``, ``mu = expit(eta)`` and, with case weights ``w``,

    loglik  = sum_i w_i * (y_i * eta_i - log(1 + exp(eta_i)))
    score   = X' (w * (y - mu))                          (p,)
    info    = X' diag(w * mu * (1 - mu)) X               (p, p)

(McCullagh & Nelder, *Generalized Linear Models*, 2nd ed., ch. 4). The
information is accumulated with one BLAS ``dsyrk`` per block on
``sqrt(w * mu * (1 - mu)) * X`` so that no n x p temporary exceeds one block.

:func:`scan` is the first pass: it checks the data (finite values, 0/1 outcomes,
non-negative weights) and collects the weighted cross-product ``X' diag(w) X``,
``X' w`` and ``X' (w y)``, from which the intercept-only start needs no further pass.
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np
from scipy.linalg.blas import dsyrk

from service.errors import DataError

from .blocks import Block, BlockSource

__all__ = ["DataSummary", "Totals", "full_symmetric", "loglik_pass", "scan"]

EXTREME_ETA = 30.0  # |eta| beyond which a fitted probability is 0 or 1 to ~1e-13
EXTREME_E = float(np.exp(-EXTREME_ETA))
CHUNK_ROWS = 4096  # rows per fused step: the chunk and its scaled copy stay in the L2 cache


@dataclass(frozen=True)
class Totals:
    """Sums over all blocks at one ``coef``: ``loglik``, ``score`` (p,), ``info`` (p, p)."""

    loglik: float
    score: np.ndarray
    info: np.ndarray
    n_extreme: int  # rows with |eta| > EXTREME_ETA (fitted probability numerically 0 or 1)


@dataclass(frozen=True)
class DataSummary:
    """What the first pass learns: counts and weighted cross-products."""

    n_obs: int  # rows
    n_positive: int  # rows with weight > 0
    sum_weights: float
    n_events: float  # sum of w * y
    has_offset: bool
    xtwx: np.ndarray  # X' diag(w) X (p, p)
    xtw: np.ndarray  # X' w (p,)
    xtwy: np.ndarray  # X' (w y) (p,)


def full_symmetric(upper: np.ndarray) -> np.ndarray:
    """Mirror the upper triangle (as written by ``dsyrk``) into a full symmetric matrix."""
    out = np.triu(upper)
    out += np.triu(upper, 1).T
    return out


def _scaled_syrk(X: np.ndarray, scale: np.ndarray, acc: np.ndarray) -> np.ndarray:
    """``acc + (scale * X)' (scale * X)`` in the upper triangle (``scale`` is (m,))."""
    Xs = X * scale[:, None]
    return dsyrk(1.0, Xs.T, beta=1.0, c=acc, trans=0, lower=0, overwrite_c=1)  # type: ignore[no-any-return]


def _bad_row(mask: np.ndarray) -> int:
    return int(np.flatnonzero(mask.reshape(mask.shape[0], -1).any(axis=1))[0])


def _check_block(b: Block, start: int, p: int, term_names: tuple[str, ...]) -> None:
    X = b.X
    if X.ndim != 2 or X.shape[1] != p:
        raise DataError(
            f"a block of X has shape {X.shape}; expected {p} columns",
            field="X",
            value=f"shape {X.shape}",
            remedy=f"give every block {p} columns, one per term",
        )
    m = X.shape[0]
    for name, arr in (("y", b.y), ("weights", b.weights), ("offset", b.offset)):
        if arr is not None and arr.shape != (m,):
            raise DataError(
                f"{name} has shape {arr.shape} in a block of {m} rows",
                field=name,
                value=f"shape {arr.shape}",
                remedy="give one value per row",
            )
    if not np.isfinite(X).all():
        bad = ~np.isfinite(X)
        row = _bad_row(bad)
        col = int(np.flatnonzero(bad[row])[0])
        raise DataError(
            f"non-finite value in term {term_names[col]!r} at row {start + row}",
            field=f"X[{start + row}, {col}]",
            value=float(X[row, col]),
            remedy="remove or impute rows with missing or infinite values before fitting",
        )
    y = b.y
    bad_y = ~((y == 0) | (y == 1))
    if bad_y.any():
        row = int(np.flatnonzero(bad_y)[0])
        raise DataError(
            f"outcome at row {start + row} is not 0 or 1",
            field=f"y[{start + row}]",
            value=float(y[row]),
            remedy="code the outcome as 0 (no event) or 1 (event)",
        )
    for name, arr in (("weights", b.weights), ("offset", b.offset)):
        if arr is not None and not np.isfinite(arr).all():
            row = int(np.flatnonzero(~np.isfinite(arr))[0])
            raise DataError(
                f"non-finite {name} at row {start + row}",
                field=f"{name}[{start + row}]",
                value=float(arr[row]),
                remedy=f"give every row a finite {name}",
            )
    if b.weights is not None and (b.weights < 0).any():
        row = int(np.flatnonzero(b.weights < 0)[0])
        raise DataError(
            f"negative weight at row {start + row}",
            field=f"weights[{start + row}]",
            value=float(b.weights[row]),
            remedy="weights are case/frequency weights and must be >= 0",
        )


def scan(blocks: BlockSource, p: int, term_names: tuple[str, ...]) -> DataSummary:
    """First pass: validate every block and collect counts and weighted cross-products."""
    xtwx = np.zeros((p, p), order="F")
    xtw = np.zeros(p)
    xtwy = np.zeros(p)
    n_obs = n_pos = 0
    sum_w = events = 0.0
    has_offset = False
    for block in blocks():
        _check_block(block, n_obs, p, term_names)
        has_offset = has_offset or block.offset is not None
        n_obs += block.X.shape[0]
        for b in _chunks(block):
            if b.weights is None:
                n_pos += b.X.shape[0]
                sum_w += b.X.shape[0]
                events += float(b.y.sum())
                xtw += b.X.sum(axis=0)
                xtwy += b.X.T @ b.y
                xtwx = dsyrk(1.0, b.X.T, beta=1.0, c=xtwx, trans=0, lower=0, overwrite_c=1)
            else:
                w = b.weights
                n_pos += int(np.count_nonzero(w > 0))
                sum_w += float(w.sum())
                wy = w * b.y
                events += float(wy.sum())
                xtw += b.X.T @ w
                xtwy += b.X.T @ wy
                xtwx = _scaled_syrk(b.X, np.sqrt(w), xtwx)
    return DataSummary(n_obs, n_pos, sum_w, events, has_offset, full_symmetric(xtwx), xtw, xtwy)


def _chunks(b: Block) -> Iterator[Block]:
    """Cache-sized slices of a block (the fused pass is memory-bound; see module docstring)."""
    m = b.X.shape[0]
    if m <= CHUNK_ROWS:
        yield b
        return
    for lo in range(0, m, CHUNK_ROWS):
        sl = slice(lo, lo + CHUNK_ROWS)
        yield Block(
            b.X[sl],
            b.y[sl],
            None if b.weights is None else b.weights[sl],
            None if b.offset is None else b.offset[sl],
        )


def loglik_pass(blocks: BlockSource, coef: np.ndarray, *, want_info: bool = True) -> Totals:
    """One fused pass: log-likelihood, score and information at ``coef``.

    With ``e = exp(-|eta|)``: ``mu = (1 if eta >= 0 else e) / (1 + e)``,
    ``log(1 + exp(eta)) = max(eta, 0) + log1p(e)`` and ``mu (1 - mu) = e / (1 + e)^2``,
    one exponential per row and accurate in both tails.
    """
    p = coef.shape[0]
    info = np.zeros((p, p), order="F")
    score = np.zeros(p)
    loglik = 0.0
    n_extreme = 0
    buf = np.empty((CHUNK_ROWS, p))
    for block in blocks():
        for b in _chunks(block):
            eta = b.X @ coef
            if b.offset is not None:
                eta += b.offset
            e = np.exp(-np.abs(eta))
            d = 1.0 + e
            mu = np.where(eta >= 0, 1.0, e) / d
            lp = b.y * eta - np.maximum(eta, 0.0) - np.log1p(e)
            resid = b.y - mu
            if b.weights is not None:
                lp *= b.weights
                resid *= b.weights
            loglik += float(lp.sum())
            score += b.X.T @ resid
            n_extreme += int(np.count_nonzero(e < EXTREME_E))
            if want_info:
                sw = np.sqrt(e) / d
                if b.weights is not None:
                    sw *= np.sqrt(b.weights)
                m = b.X.shape[0]
                Xs = (
                    b.X * sw[:, None]
                    if m > CHUNK_ROWS
                    else np.multiply(b.X, sw[:, None], out=buf[:m])
                )
                info = dsyrk(1.0, Xs.T, beta=1.0, c=info, trans=0, lower=0, overwrite_c=1)
    return Totals(loglik, score, full_symmetric(info) if want_info else info, n_extreme)
