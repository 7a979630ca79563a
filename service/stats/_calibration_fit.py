"""Maximum-likelihood fits of the two calibration models, by Newton-Raphson on sums.

    intercept:  logit P(y=1) = a + logit(p)          (offset; one parameter)
    slope:      logit P(y=1) = a + b logit(p)        (two parameters)

Both are ordinary logistic regressions with one or two columns, so each Newton step needs only
the weighted sums ``S_k = sum w r x^k`` (score, r = y - mu) and ``V_k = sum w v x^k``
(information, v = mu (1 - mu)) for k = 0, 1, 2 - no design matrix, no per-block bookkeeping.
Start values are the perfectly calibrated model (a = 0, b = 1), which is where a usable model
sits, so 3-6 steps reach ``max |step| < tol``. A step larger than :data:`SMALL_STEP` that
lowers the log-likelihood is halved (at most 30 times); smaller steps, where the quadratic
model of the concave log-likelihood is accurate, are taken without evaluating it. Standard
errors: square roots of the diagonal of the inverse information at the estimate (Wald), as
in any logistic fit. The estimates equal the general engine's
(:func:`service.stats.fit.fit_logistic`) to its tolerance; this skips only its machinery
for many columns and its separation linear programme (with one covariate, separation is
the order check below).

No finite estimate exists when the outcomes are all 0 or all 1 (both models) or when logit(p)
separates events from non-events (slope model: every event's logit(p) >= every non-event's,
or <=). Then the fit reports ``converged = False`` and NaN estimates.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.special import expit, log_expit

from service.stats._outcome_arrays import FloatArray

__all__ = ["CalibrationFit", "fit_intercept", "fit_slope"]

MAX_ITER = 50
MAX_HALVINGS = 30
SMALL_STEP = 0.25  # steps below this (logit scale) are taken without a likelihood check


@dataclass(frozen=True)
class CalibrationFit:
    """Estimates (a,) or (a, b), their Wald standard errors, and whether Newton converged."""

    coef: tuple[float, ...]
    std_error: tuple[float, ...]
    converged: bool
    n_obs: int
    n_events: float


def _wsum(values: FloatArray, w: FloatArray | None) -> float:
    return float(values.sum() if w is None else values @ w)


def _loglik(y: FloatArray, eta: FloatArray, w: FloatArray | None) -> float:
    # y log mu + (1 - y) log(1 - mu) = log_expit(eta) - (1 - y) eta, stable for large |eta|
    return _wsum(log_expit(eta) - (1.0 - y) * eta, w)


def _failed(k: int, n: int, events: float) -> CalibrationFit:
    nan = (float("nan"),) * k
    return CalibrationFit(nan, nan, False, n, events)


def _newton(
    y: FloatArray, offset: FloatArray, x: FloatArray | None, w: FloatArray | None, tol: float
) -> CalibrationFit:
    n = int(y.shape[0])
    events = _wsum(y, w)
    total = float(n) if w is None else float(w.sum())
    if events <= 0 or events >= total:
        return _failed(1 if x is None else 2, n, events)
    coef = np.array([0.0] if x is None else [0.0, 1.0])

    def eta_of(c: FloatArray) -> FloatArray:
        return offset + float(c[0]) if x is None else float(c[0]) + float(c[1]) * x

    eta = eta_of(coef)
    ll: float | None = None
    converged = False
    info = np.eye(coef.shape[0])
    for _ in range(MAX_ITER):
        mu = expit(eta)
        r, v = y - mu, mu * (1.0 - mu)
        if x is None:
            grad = np.array([_wsum(r, w)])
            info = np.array([[_wsum(v, w)]])
        else:
            vx = v * x
            grad = np.array([_wsum(r, w), _wsum(r * x, w)])
            v0, v1, v2 = _wsum(v, w), _wsum(vx, w), _wsum(vx * x, w)
            info = np.array([[v0, v1], [v1, v2]])
        step = np.linalg.solve(info, grad)
        trial = coef + step
        eta_t = eta_of(trial)
        if float(np.max(np.abs(step))) > SMALL_STEP:  # guard large steps by the likelihood
            ll = _loglik(y, eta, w) if ll is None else ll
            for _half in range(MAX_HALVINGS):
                ll_t = _loglik(y, eta_t, w)
                if ll_t >= ll - 1e-12 * abs(ll):
                    break
                step = step / 2.0
                trial = coef + step
                eta_t = eta_of(trial)
            ll = ll_t
        else:
            ll = None  # not needed again unless a later step is large
        coef, eta = trial, eta_t
        if float(np.max(np.abs(step))) < tol:
            converged = True
            break
    # ``info`` is the information at the last-but-one iterate; once converged that is within
    # ``tol`` of the estimate, so its inverse is the Wald covariance to that precision
    se = np.sqrt(np.diag(np.linalg.inv(info)))
    return CalibrationFit(
        tuple(float(c) for c in coef), tuple(float(s) for s in se), converged, n, events
    )


def fit_intercept(
    y: FloatArray, logit_p: FloatArray, w: FloatArray | None, tol: float = 1e-10
) -> CalibrationFit:
    """(a,) of logit P(y=1) = a + logit(p); ``y``, ``logit_p``, ``w`` of shape (n,)."""
    return _newton(y, logit_p, None, w, tol)


def fit_slope(
    y: FloatArray, logit_p: FloatArray, w: FloatArray | None, tol: float = 1e-10
) -> CalibrationFit:
    """(a, b) of logit P(y=1) = a + b logit(p); NaN and not converged under separation."""
    keep = y > 0.5 if w is None else (y > 0.5) & (w > 0)
    drop = y < 0.5 if w is None else (y < 0.5) & (w > 0)
    if keep.any() and drop.any():
        x1, x0 = logit_p[keep], logit_p[drop]
        if x1.min() >= x0.max() or x1.max() <= x0.min():
            return _failed(2, int(y.shape[0]), _wsum(y, w))
    return _newton(y, logit_p, logit_p, w, tol)
