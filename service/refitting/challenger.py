"""The challenger: one update of the champion fitted on the development part, with covariance.

With the champion's coefficients ``coef_old`` (p,) and covariance ``cov_old`` (p, p), the old
linear predictor ``eta_old = X coef_old`` and ``e0`` the intercept's unit vector:

* ``intercept``: logit P = a + eta_old (offset); ``coef = coef_old + a e0``;
  ``cov = cov_old + var(a) e0 e0'``;
* ``recalibrate``: logit P = a + b eta_old; ``coef = b coef_old + a e0``; by the delta method
  with J = [e0, coef_old] (p, 2) and S = cov(a, b), ``cov = b^2 cov_old + J S J'``;
* ``refit``: all coefficients re-estimated on the new data; ``cov`` from that fit.

The updates' covariances treat the champion's estimates (from its own, earlier training data)
as independent of the new estimates of (a, b) — the usual first-order approximation; it keeps
the score intervals of an updated model as wide as the champion's uncertainty warrants.
All fits are maximum likelihood with riskfit's engine (:func:`service.stats.fit.fit_logistic`),
the same as :func:`service.stats.updating.fit_update` uses, so coefficients agree with the
closed test's.
"""

from __future__ import annotations

from dataclasses import dataclass, replace
from typing import Any

import numpy as np
from scipy.special import expit

from service.fit_summaries import drop_term_dicts
from service.fitting import finite, fit_statistics_dict, term_table_dict
from service.scoring import LoadedVersion
from service.stats.blocks import array_blocks
from service.stats.drop_groups import drop_groups
from service.stats.fit import LogisticFit, fit_logistic
from service.stats.inference import drop_term_tests, global_lr_test, term_table

__all__ = ["Challenger", "fit_challenger"]


@dataclass(frozen=True)
class Challenger:
    """The update's coefficients on the champion's terms and what its version row stores."""

    method: str
    coef: np.ndarray  # (p,)
    cov: np.ndarray  # (p, p)
    intercept: float  # a (0 for a refit)
    slope: float  # b (1 for the intercept update and the refit)
    fit: LogisticFit  # the fitted model of the update (loglik, counts, convergence)
    fit_stats: dict[str, Any]
    term_table: dict[str, Any]


def _null_loglik(y: np.ndarray) -> float:
    """Intercept-only log-likelihood without offset: n1 log(pbar) + n0 log(1 - pbar)."""
    n, n1 = float(y.size), float(y.sum())
    n0 = n - n1
    return float(sum(k * np.log(k / n) for k in (n1, n0) if k > 0))


def _on_terms(
    fit: LogisticFit, v: LoadedVersion, coef: np.ndarray, cov: np.ndarray, y: np.ndarray
) -> LogisticFit:
    """``fit`` (an update of 1 or 2 parameters) restated on the champion's terms."""
    null = _null_loglik(y)
    return replace(
        fit,
        term_names=v.term_names,
        coef=coef,
        cov=cov,
        std_error=np.sqrt(np.clip(np.diag(cov), 0.0, None)),
        null_loglik=null,
        null_deviance=-2.0 * null,
        mcfadden_r2=1.0 - fit.loglik / null if null < 0 else float("nan"),
    )


def fit_challenger(
    method: str, X: np.ndarray, y: np.ndarray, v: LoadedVersion, confidence_level: float
) -> Challenger:
    """Fit ``method`` (intercept, recalibrate or refit) on X (n, p), y (n,) against ``v``."""
    n, p = X.shape
    eta_old = X @ v.coef
    e0 = np.zeros(p)
    e0[0] = 1.0
    drops: list[dict[str, Any]] = []
    if method == "intercept":
        f = fit_logistic(np.ones((n, 1)), y, offset=eta_old, term_names=["intercept"])
        a, b = float(f.coef[0]), 1.0
        coef = v.coef + a * e0
        cov = v.cov + float(f.cov[0, 0]) * np.outer(e0, e0)
        full = _on_terms(f, v, coef, cov, y)
        lr = None  # the update's only parameter is the intercept: no global test
    elif method == "recalibrate":
        Z = np.column_stack([np.ones(n), eta_old])
        f = fit_logistic(Z, y, term_names=["intercept", "eta_old"])
        a, b = float(f.coef[0]), float(f.coef[1])
        coef = b * v.coef + a * e0
        J = np.column_stack([e0, v.coef])
        cov = b * b * v.cov + J @ f.cov @ J.T
        full = _on_terms(f, v, coef, cov, y)
        lr = global_lr_test(f)  # slope on eta_old = 0: does the old score still rank?
    else:
        full = fit_logistic(X, y, term_names=v.term_names)
        a, b, coef, cov = 0.0, 1.0, np.asarray(full.coef), np.asarray(full.cov)
        lr = global_lr_test(full)
        groups = drop_groups(v.encoding.term_groups, v.encoding.interactions)
        drops = drop_term_dicts(drop_term_tests(array_blocks(X, y), full, groups))
    prob = expit(X @ coef)
    stats = fit_statistics_dict(full, y, prob, None)
    stats["global_lr_test"] = (
        None
        if lr is None or not np.isfinite(lr.p_value)
        else {
            "name": lr.name,
            "statistic": finite(lr.statistic),
            "df": lr.df,
            "p_value": finite(lr.p_value),
        }
    )
    stats["drop_term_tests"] = drops
    k = {"intercept": 1, "recalibrate": 2}.get(method, p)
    stats["update"] = {"method": method, "intercept": a, "slope": b, "n_parameters": k}
    table = term_table_dict(term_table(full, confidence_level), full)
    return Challenger(method, coef, cov, a, b, full, stats, table)
