"""Inference for a fitted logistic model: Wald and profile-likelihood intervals, LR tests.

* Wald: ``z = b / se``, two-sided ``p = 2 (1 - Phi(|z|))``, interval ``b -/+ z_{1-a/2} se``;
  odds ratio ``exp(b)`` with interval ``exp`` of the limits (common practice).
* Profile likelihood (Venzon & Moolgavkar 1988, *Applied Statistics* 37:87-94): the
  limits for ``b_j`` solve ``2 (l(b_hat) - l_p(c)) = chi2_{1, level}``, where
  ``l_p(c)`` is the (penalised) log-likelihood maximised over the other coefficients
  with ``b_j = c`` (a constrained Newton refit), root-found with ``scipy.optimize.brentq``.
  For Firth fits ``l`` is the penalised log-likelihood with the full-model penalty
  (Heinze & Schemper 2002). Estimates, SEs, z and p stay Wald in the table.
* Likelihood-ratio tests: ``2 (l_full - l_restricted)`` against chi2 with the number
  of restricted coefficients as df; the global test restricts all but the intercept.
  A drop-term refit (columns ``d`` set to 0, the others ``f`` free) starts where the full
  fit's quadratic approximation puts the restricted maximum,
  ``b_f = b_hat_f + I_ff^{-1} I_fd b_hat_d`` with ``I = cov^{-1}``, and stops when the Newton
  decrement ``g_f' I_ff^{-1} g_f`` (twice the predicted remaining gain in log-likelihood,
  Boyd & Vandenberghe 2004, sec. 9.5.1) is below :data:`DECREMENT_TOL`; the restricted
  log-likelihood is then ``l + decrement / 2`` (the quadratic model's maximum). Three or
  four passes over the data instead of six; the statistic agrees with a fully converged
  refit to about 1e-9 (tests/stats/test_drop_term_refits.py).
  The last pass of a refit skips the information (about half the cost of a pass) when
  Newton's quadratic convergence says the coming step ends it: with ``r = lambda /
  lambda_prev^2`` seen on the full step just taken (``lambda^2`` the decrement), the
  predicted decrement after the step, ``(r lambda^2)^2``, is below a tenth of
  :data:`DECREMENT_TOL`, and ``r lambda`` (the relative change of the information along the
  step, of the order of the third derivative times the step) is at most :data:`INFO_DRIFT`.
  The decrement at the new point is then taken with the information at the step's start;
  its error, about ``r lambda`` times a decrement below 1e-6, stays below 1e-9. If that
  decrement is not below the tolerance, the usual full pass and step follow (mle and ridge;
  Firth's penalty needs the information at every point).
  Firth fits use penalised log-likelihoods (Heinze & Schemper 2002); ridge fits use the
  penalised ones too (then the chi2 reference is only approximate).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from scipy.linalg import LinAlgError, cho_factor, cho_solve
from scipy.optimize import brentq
from scipy.special import expit
from scipy.stats import chi2, norm

from service.errors import SpecError

from .blocks import BlockSource
from .fit import LogisticFit, constrained_fit
from .likelihood import loglik_pass
from .metrics import auc, brier
from .newton import Objective, State
from .predict import z_value

__all__ = [
    "FitStatistics",
    "LRTest",
    "TermRow",
    "TermTable",
    "drop_term_tests",
    "fit_statistics",
    "global_lr_test",
    "profile_intervals",
    "term_table",
]

# Newton decrement at which a drop-term refit stops (log-likelihood units): near the maximum
# the remaining error of ``l + decrement / 2`` is of order decrement^1.5 (~1e-9 here).
DECREMENT_TOL = 1e-6
_DROP_MAX_STEPS = 50
# Largest predicted relative change of the information over the last step of a drop-term
# refit for which the final pass may skip the information (module docstring).
INFO_DRIFT = 1e-3


@dataclass(frozen=True)
class TermRow:
    name: str
    estimate: float
    std_error: float
    z: float
    p_value: float
    ci_lower: float
    ci_upper: float
    odds_ratio: float
    odds_ratio_ci_lower: float
    odds_ratio_ci_upper: float


@dataclass(frozen=True)
class TermTable:
    rows: tuple[TermRow, ...]
    confidence_level: float
    ci_method: str  # "wald" | "profile-likelihood"


@dataclass(frozen=True)
class LRTest:
    name: str
    statistic: float
    df: int
    p_value: float


def _row(name: str, b: float, se: float, lo: float, hi: float) -> TermRow:
    z = b / se if se > 0 else float("nan")
    p = float(2.0 * norm.sf(abs(z))) if np.isfinite(z) else float("nan")
    with np.errstate(over="ignore"):
        return TermRow(
            name, b, se, z, p, lo, hi, float(np.exp(b)), float(np.exp(lo)), float(np.exp(hi))
        )


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


def _lr(name: str, stat: float, df: int) -> LRTest:
    stat = max(stat, 0.0)
    return LRTest(name, stat, df, float(chi2.sf(stat, df)) if df > 0 else float("nan"))


def global_lr_test(fit: LogisticFit) -> LRTest:
    """LR test of all terms but the intercept against the intercept-only model."""
    df = len(fit.term_names) - (0 if fit.intercept_index is None else 1)
    if fit.method == "firth" and np.isfinite(fit.null_penalized_loglik):
        stat = 2.0 * (fit.penalized_loglik - fit.null_penalized_loglik)
    else:
        stat = 2.0 * (fit.loglik - fit.null_loglik)
    return _lr("global", stat, df)


def drop_term_tests(
    blocks: BlockSource, fit: LogisticFit, groups: Mapping[str, Sequence[int]]
) -> tuple[LRTest, ...]:
    """LR test per group: all its columns set to 0 together (e.g. ``Encoding.term_groups``)."""
    out = []
    p = len(fit.term_names)
    info = _full_information(fit)
    for name, cols in groups.items():
        idx = sorted({int(c) for c in cols})
        if not idx or idx[0] < 0 or idx[-1] >= p or fit.intercept_index in idx:
            raise SpecError(
                f"term group {name!r} must list non-intercept columns of the model",
                field=f"groups.{name}",
                value=list(cols),
                remedy=f"use column indices in 0..{p - 1} other than the intercept",
            )
        restricted = _restricted_loglik(blocks, fit, info, idx)
        out.append(_lr(name, 2.0 * (fit.penalized_loglik - restricted), len(idx)))
    return tuple(out)


def _full_information(fit: LogisticFit) -> np.ndarray | None:
    """The (penalised) information at the estimate, ``cov^{-1}``; None if cov is unusable."""
    if not np.all(np.isfinite(fit.cov)):
        return None
    try:
        return np.linalg.inv(fit.cov)
    except np.linalg.LinAlgError:
        return None


def _warm_start(fit: LogisticFit, info: np.ndarray | None, fixed: np.ndarray) -> np.ndarray:
    """Restricted maximum of the full fit's quadratic approximation (module docstring)."""
    coef = fit.coef.astype(np.float64, copy=True)
    free = np.setdiff1d(np.arange(coef.size), fixed)
    if info is not None and free.size:
        try:
            shift = np.linalg.solve(
                info[np.ix_(free, free)], info[np.ix_(free, fixed)] @ coef[fixed]
            )
            coef[free] += shift
        except np.linalg.LinAlgError:
            pass
    coef[fixed] = 0.0
    return coef


def _restricted_loglik(
    blocks: BlockSource, fit: LogisticFit, info: np.ndarray | None, fixed: list[int]
) -> float:
    """Maximum (penalised) log-likelihood with ``coef[fixed] = 0`` (Newton, decrement stop)."""
    start = _warm_start(fit, info, np.asarray(fixed, dtype=np.intp))
    mask = np.ones(start.size)
    if fit.intercept_index is not None:
        mask[fit.intercept_index] = 0.0
    obj = Objective(blocks, fit.method, fit.ridge_lambda, mask)
    free = np.setdiff1d(np.arange(start.size), fixed)
    state: State | None = obj.evaluate(start)
    last: float | None = None  # decrement before the last step, if that step was a full one
    for _ in range(_DROP_MAX_STEPS):
        if state is None or free.size == 0:
            break
        try:
            chol = cho_factor(state.info[np.ix_(free, free)], lower=True, check_finite=False)
        except LinAlgError:
            break
        step = cho_solve(chol, state.score[free], check_finite=False)
        decrement = float(state.score[free] @ step)
        if 0.0 <= decrement <= DECREMENT_TOL:
            return state.penalized_loglik + 0.5 * decrement
        if last is not None and fit.method != "firth" and _last_step(last, decrement):
            final = _final_without_information(obj, state, free, step, chol)
            if final is not None:
                return final
        state, full = _halving_step(obj, state, free, step)
        last = decrement if full else None
    if state is not None and free.size == 0:
        return state.penalized_loglik
    fixed_at = dict.fromkeys(fixed, 0.0)  # fall back to the general constrained refit
    return constrained_fit(blocks, fit, fixed_at, start=start).penalized_loglik


def _last_step(before: float, now: float) -> bool:
    """Whether the coming Newton step should end the refit (module docstring).

    Quadratic convergence: ``lambda_next ~ r lambda^2`` with ``r = lambda / lambda_prev^2``
    seen on the full step just taken. True when ten times the predicted decrement after the
    step is below :data:`DECREMENT_TOL` and the step is short enough (``r lambda <=``
    :data:`INFO_DRIFT`) for the information at its start to stand for the one at its end.
    """
    lam = np.sqrt(now)
    r = lam / before
    return bool(10.0 * (r * now) ** 2 <= DECREMENT_TOL and r * lam <= INFO_DRIFT)


def _final_without_information(
    obj: Objective, state: State, free: np.ndarray, step: np.ndarray, chol: tuple[np.ndarray, bool]
) -> float | None:
    """``l + decrement / 2`` after the full step, from a pass without the information.

    The decrement at the new point uses the information at ``state`` (its Cholesky factor
    ``chol``); None when the step does not increase the log-likelihood or the decrement is not
    yet below :data:`DECREMENT_TOL` (the caller then takes the usual step).
    """
    coef = state.coef.copy()
    coef[free] += step
    new = obj.from_totals(coef, loglik_pass(obj.blocks, coef, want_info=False))
    if new is None or new.penalized_loglik < state.penalized_loglik:
        return None
    g = new.score[free]
    decrement = float(g @ cho_solve(chol, g, check_finite=False))
    if 0.0 <= decrement <= DECREMENT_TOL:
        return new.penalized_loglik + 0.5 * decrement
    return None


def _halving_step(
    obj: Objective, state: State, free: np.ndarray, step: np.ndarray
) -> tuple[State | None, bool]:
    """The Newton step, halved until the (penalised) log-likelihood does not decrease.

    Returns the new state (None if 40 halvings did not help) and whether the full step was taken.
    """
    floor = state.penalized_loglik - 1e-12 * abs(state.penalized_loglik)
    for halvings in range(40):
        coef = state.coef.copy()
        coef[free] += step
        new = obj.evaluate(coef)
        if new is not None and new.penalized_loglik >= floor:
            return new, halvings == 0
        step = step / 2.0
    return None, False


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
