"""Inference for a fitted logistic model: Wald and profile-likelihood intervals, LR tests.

* Wald: ``z = b / se``, two-sided ``p = 2 (1 - Phi(|z|))``, interval ``b -/+ z_{1-a/2} se``;
  odds ratio ``exp(b)`` with interval ``exp`` of the limits (common practice). An odds ratio
  or limit is ``None`` exactly when ``exp`` would overflow a double (log-odds value above
  :data:`MAX_LOG_ODDS_RATIO` = ``log(DBL_MAX)`` ~ 709.78, or a profile limit of ``+inf``);
  the log-odds estimate and its Wald limits stay finite whenever the SE is.
* Profile likelihood (Venzon & Moolgavkar 1988, *Applied Statistics* 37:87-94): the
  limits for ``b_j`` solve ``2 (l(b_hat) - l_p(c)) = chi2_{1, level}``, where
  ``l_p(c)`` is the (penalised) log-likelihood maximised over the other coefficients
  with ``b_j = c`` (a constrained Newton refit), root-found with ``scipy.optimize.brentq``.
  For Firth fits ``l`` is the penalised log-likelihood with the full-model penalty
  (Heinze & Schemper 2002). Estimates, SEs, z and p stay Wald in the table.
* Likelihood-ratio tests: ``2 (l_full - l_restricted)`` against chi2 with the number
  of restricted coefficients as df; the global test restricts all but the intercept.
  Drop-term refits: :mod:`service.stats.drop_terms`.
  Firth fits use penalised log-likelihoods (Heinze & Schemper 2002); ridge fits use the
  penalised ones too (then the chi2 reference is only approximate).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.optimize import brentq
from scipy.special import expit
from scipy.stats import chi2, norm

from .blocks import BlockSource
from .drop_terms import LRTest, drop_term_tests, lr_test
from .fit import LogisticFit, constrained_fit
from .metrics import auc, brier
from .predict import z_value

__all__ = [
    "MAX_LOG_ODDS_RATIO",
    "FitStatistics",
    "LRTest",
    "TermRow",
    "TermTable",
    "drop_term_tests",
    "fit_statistics",
    "global_lr_test",
    "odds_ratio",
    "profile_intervals",
    "term_table",
]


MAX_LOG_ODDS_RATIO = float(np.log(np.finfo(np.float64).max))  # ~709.78: exp() above overflows


def odds_ratio(log_odds: float) -> float | None:
    """``exp(log_odds)``, or ``None`` when it would overflow a double (or is NaN).

    ``exp(-inf) = 0`` and the underflow of very negative values to ``0.0`` are kept: zero is
    a finite, correctly rounded odds ratio there.
    """
    v = float(log_odds)
    if not v <= MAX_LOG_ODDS_RATIO:  # NaN and +inf included
        return None
    return float(np.exp(v))


@dataclass(frozen=True)
class TermRow:
    """One term; the odds-ratio fields are ``None`` where ``exp`` overflows (see module)."""

    name: str
    estimate: float
    std_error: float
    z: float
    p_value: float
    ci_lower: float
    ci_upper: float
    odds_ratio: float | None
    odds_ratio_ci_lower: float | None
    odds_ratio_ci_upper: float | None


@dataclass(frozen=True)
class TermTable:
    rows: tuple[TermRow, ...]
    confidence_level: float
    ci_method: str  # "wald" | "profile-likelihood"


def _row(name: str, b: float, se: float, lo: float, hi: float) -> TermRow:
    z = b / se if se > 0 else float("nan")
    p = float(2.0 * norm.sf(abs(z))) if np.isfinite(z) else float("nan")
    return TermRow(name, b, se, z, p, lo, hi, odds_ratio(b), odds_ratio(lo), odds_ratio(hi))


def term_table(fit: LogisticFit, confidence_level: float = 0.95) -> TermTable:
    """Wald table: estimates, SEs, z, p-values, intervals and odds ratios."""
    z = z_value(confidence_level)
    rows = tuple(
        _row(name, float(b), float(se), float(b - z * se), float(b + z * se))
        for name, b, se in zip(fit.term_names, fit.coef, fit.std_error, strict=True)
    )
    return TermTable(rows, confidence_level, "wald")


def _profile_limit(
    blocks: BlockSource, fit: LogisticFit, j: int, side: float, crit: float
) -> float:
    """One profile limit of coefficient ``j`` (``side`` = -1 lower, +1 upper)."""
    b, se = float(fit.coef[j]), float(fit.std_error[j])
    top = fit.penalized_loglik
    warm = [fit.coef]

    def excess(c: float) -> float:
        st = constrained_fit(blocks, fit, {j: c}, start=warm[-1])
        warm.append(st.coef)
        return 2.0 * (top - st.penalized_loglik) - crit

    step = max(se, 1e-8) * np.sqrt(crit)
    inner, outer = b, b + side * step
    for _ in range(30):
        if excess(outer) > 0:
            break
        inner, outer = outer, b + side * (abs(outer - b) * 2.0)
    else:
        return float(side * np.inf)
    warm[:] = [fit.coef]
    return float(brentq(excess, inner, outer, xtol=1e-12 * max(1.0, abs(b)), rtol=1e-12))


def profile_intervals(
    blocks: BlockSource, fit: LogisticFit, confidence_level: float = 0.95
) -> TermTable:
    """Profile-likelihood intervals for every term (Firth fits: penalised profile).

    ``blocks`` must be the data the fit was made on. A limit that cannot be bracketed
    (the profile never drops by the critical value) is reported as -inf / +inf.
    """
    z_value(confidence_level)
    crit = float(chi2.ppf(confidence_level, 1))
    rows = []
    for j, name in enumerate(fit.term_names):
        lo = _profile_limit(blocks, fit, j, -1.0, crit)
        hi = _profile_limit(blocks, fit, j, 1.0, crit)
        rows.append(_row(name, float(fit.coef[j]), float(fit.std_error[j]), lo, hi))
    return TermTable(tuple(rows), confidence_level, "profile-likelihood")


def global_lr_test(fit: LogisticFit) -> LRTest:
    """LR test of all terms but the intercept against the intercept-only model."""
    df = len(fit.term_names) - (0 if fit.intercept_index is None else 1)
    if fit.method == "firth" and np.isfinite(fit.null_penalized_loglik):
        stat = 2.0 * (fit.penalized_loglik - fit.null_penalized_loglik)
    else:
        stat = 2.0 * (fit.loglik - fit.null_loglik)
    return lr_test("global", stat, df)


@dataclass(frozen=True)
class FitStatistics:
    """Summary measures with the counts behind them (in-sample AUC and Brier)."""

    n_obs: int
    n_events: float
    loglik: float
    null_loglik: float
    deviance: float
    null_deviance: float
    aic: float
    bic: float
    mcfadden_r2: float
    auc: float
    brier: float


def fit_statistics(blocks: BlockSource, fit: LogisticFit) -> FitStatistics:
    """In-sample statistics of ``fit`` on the data ``blocks`` it was fitted on."""
    ys, ps, ws = [], [], []
    for b in blocks():
        eta = b.X @ fit.coef + (0.0 if b.offset is None else b.offset)
        ys.append(b.y)
        ps.append(expit(eta))
        ws.append(np.ones(b.y.shape[0]) if b.weights is None else b.weights)
    y, p, w = np.concatenate(ys), np.concatenate(ps), np.concatenate(ws)
    return FitStatistics(
        fit.n_obs,
        fit.n_events,
        fit.loglik,
        fit.null_loglik,
        fit.deviance,
        fit.null_deviance,
        fit.aic,
        fit.bic,
        fit.mcfadden_r2,
        auc(y, p, w),
        brier(y, p, w),
    )
