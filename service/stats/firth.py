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

import numpy as np
from scipy.linalg import solve_triangular
from scipy.special import expit

from .blocks import BlockSource

__all__ = ["half_logdet", "hat_score_adjustment"]


def half_logdet(chol_lower: np.ndarray) -> float:
    """``1/2 log det I`` from the lower Cholesky factor ``L`` of ``I`` (= sum log diag L)."""
    return float(np.log(np.diag(chol_lower)).sum())


def hat_score_adjustment(
    blocks: BlockSource, coef: np.ndarray, chol_lower: np.ndarray
) -> tuple[np.ndarray, float]:
    """Second pass at ``coef``: ``sum_i x_i h_i (1/2 - mu_i)`` (p,) and ``sum_i h_i`` (= p).

    ``chol_lower`` is the lower Cholesky factor of ``I(coef)``; ``h_i`` is
    ``W_ii * ||L^{-1} x_i||^2``.
    """
    adj = np.zeros(coef.shape[0])
    trace = 0.0
    for b in blocks():
        eta = b.X @ coef
        if b.offset is not None:
            eta += b.offset
        mu = expit(eta)
        var = mu * (1.0 - mu)
        if b.weights is not None:
            var *= b.weights
        Z = solve_triangular(chol_lower, b.X.T, lower=True, check_finite=False)
        h = var * np.einsum("ij,ij->j", Z, Z)
        adj += b.X.T @ (h * (0.5 - mu))
        trace += float(h.sum())
    return adj, trace
