"""Predictions with confidence intervals on the probability scale.

For rows ``X`` (n, p), coefficients ``coef`` (p,) and their covariance ``cov``
(p, p):

    eta    = X @ coef + offset
    se_eta = sqrt(diag(X cov X'))   computed row-wise as sqrt(rowsum((X @ cov) * X))
    p      = expit(eta),   interval = expit(eta -/+ z * se_eta),  z = Phi^-1((1 + level) / 2)

The interval is formed on the logit scale and transformed, so it always lies in
[0, 1] (common practice; e.g. Hosmer, Lemeshow & Sturdivant, *Applied Logistic
Regression*, 3rd ed., sec. 1.4). Work is done in row chunks so that temporaries
stay small for large batches.

Overflow: ``expit`` is scipy's, exact to rounding for every double (``expit(-inf) = 0``,
``expit(inf) = 1``, no overflow). A row whose quadratic form overflows (entries beyond about
1e154) is computed again scaled by its largest entry ``s = max_j |x_j|``:
``se = s * sqrt((x/s) cov (x/s)')`` (the scaling of overflow-free norms, common practice), so
``se_eta`` is finite whenever its true value is. ``eta`` itself is ``inf`` only when the true
value exceeds the largest double; callers refuse such rows (service/score_guard.py).
"""

from __future__ import annotations

import functools
import math
from dataclasses import dataclass

import numpy as np
from scipy.special import expit, ndtri

from service.errors import DataError, SpecError

__all__ = ["Prediction", "all_finite", "contributions", "predict", "z_value"]

_CHUNK = 65536
_FEW = 8  # up to this many values, Python's own checks beat a numpy reduction


def all_finite(a: np.ndarray) -> bool:
    """Whether every value of the 1-d float array ``a`` is finite (cheap for a few values)."""
    if a.shape[0] <= _FEW:
        return all(map(math.isfinite, a.tolist()))
    return bool(np.isfinite(a).all())


@dataclass(frozen=True)
class Prediction:
    """Per-row linear predictor, its SE, probability and interval (all (n,))."""

    eta: np.ndarray
    se_eta: np.ndarray
    probability: np.ndarray
    ci_lower: np.ndarray
    ci_upper: np.ndarray
    confidence_level: float


@functools.lru_cache(maxsize=64)  # a service sees a handful of levels, each on every request
def z_value(confidence_level: float) -> float:
    """Two-sided standard-normal quantile for ``confidence_level`` in (0, 1)."""
    if not 0.0 < confidence_level < 1.0:
        raise SpecError(
            "confidence_level must lie strictly between 0 and 1",
            field="confidence_level",
            value=confidence_level,
            remedy="use e.g. 0.95",
        )
    return float(ndtri(0.5 + confidence_level / 2.0))


def _matrix(X: np.ndarray, p: int) -> np.ndarray:
    X = np.asarray(X, dtype=np.float64)
    if X.ndim != 2 or X.shape[1] != p:
        raise DataError(
            f"X must have {p} columns, one per term",
            field="X",
            value=f"shape {X.shape}",
            remedy="build X with the model's encoding",
        )
    if not np.isfinite(X).all():
        row = int(np.flatnonzero(~np.isfinite(X).all(axis=1))[0])
        raise DataError(
            f"non-finite value in row {row} of X",
            field=f"X[{row}]",
            value=X[row].tolist(),
            remedy="supply finite values for every feature",
        )
    return X


def predict(
    X: np.ndarray,
    coef: np.ndarray,
    cov: np.ndarray,
    *,
    offset: np.ndarray | None = None,
    confidence_level: float = 0.95,
) -> Prediction:
    """Linear predictor, SE, probability and its interval for each row of ``X``."""
    coef = np.asarray(coef, dtype=np.float64)
    cov = np.asarray(cov, dtype=np.float64)
    X = _matrix(X, coef.shape[0])
    z = z_value(confidence_level)
    eta = X @ coef
    if offset is not None:
        eta = eta + np.asarray(offset, dtype=np.float64)
    if X.shape[0] <= _CHUNK:
        se = np.einsum("ij,ij->i", np.dot(X, cov), X)
    else:
        se = np.empty(X.shape[0])
        for start in range(0, X.shape[0], _CHUNK):
            Xc = X[start : start + _CHUNK]
            se[start : start + _CHUNK] = np.einsum("ij,ij->i", np.dot(Xc, cov), Xc)  # no GIL
    se = np.sqrt(np.maximum(se, 0.0))  # rounding can leave -0 or -1e-17
    if not all_finite(se):  # overflow in x cov x': those rows again, scaled
        rows = np.flatnonzero(~np.isfinite(se))
        scale = np.abs(X[rows]).max(axis=1)
        Y = X[rows] / scale[:, None]
        se[rows] = scale * np.sqrt(np.maximum(np.einsum("ij,ij->i", np.dot(Y, cov), Y), 0.0))
    half = z * se
    return Prediction(eta, se, expit(eta), expit(eta - half), expit(eta + half), confidence_level)


def contributions(X: np.ndarray, coef: np.ndarray) -> np.ndarray:
    """Per-term contributions to eta, ``X * coef`` (n, p); rows sum to eta minus offset."""
    coef = np.asarray(coef, dtype=np.float64)
    out: np.ndarray = _matrix(X, coef.shape[0]) * coef
    return out
