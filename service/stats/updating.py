"""Model updating on new data and the closed testing procedure that chooses among updates.

Given a design X (n, p) whose column ``intercept_index`` is the intercept, outcomes y (n,),
frequency weights, and the champion's coefficients ``coef_old`` (p,), so that the old
linear predictor is eta_old = X coef_old, four nested models (Steyerberg, *Clinical
Prediction Models*, 2nd ed. 2019, ch. 20; Janssen et al., J Clin Epidemiol 2008):

=============  ==========================================  ==========================
unchanged      logit P(y=1) = eta_old                       0 parameters estimated
intercept      logit P(y=1) = a + eta_old  (offset)         1
recalibrate    logit P(y=1) = a + b eta_old                 2
refit          logit P(y=1) = X coef                        p
=============  ==========================================  ==========================

Updated coefficients (the algebra): a + b X coef_old = X (b coef_old) + a, and the intercept
column is all ones, so ``coef_new = b * coef_old`` with ``a`` added to the intercept
element (b = 1 for the intercept update).

Closed testing (Vergouwe, Nieboer, Oostenbrink et al., Stat Med 2017): each simpler model is
compared with the refit by a likelihood-ratio test, LR = 2 (loglik_refit - loglik_model) on
p - k degrees of freedom, in the order unchanged -> intercept -> recalibrate; the first
model not significantly worse at level ``alpha`` (default 0.05) is chosen, and the refit
when all three are. A test with 0 degrees of freedom (p <= 2, where the simpler model
spans the refit) is not made: the simpler, equivalent model is chosen.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Literal

import numpy as np
from numpy.typing import ArrayLike
from scipy import stats

from service.errors import DataError, SpecError
from service.stats._gates import GateConfig, GateReport, GateResult, evaluate_gates
from service.stats._outcome_arrays import FloatArray, as_outcomes, as_weights
from service.stats.fit import fit_logistic

__all__ = [
    "UPDATE_ORDER",
    "ClosedTestResult",
    "GateConfig",
    "GateReport",
    "GateResult",
    "UpdateMethod",
    "UpdateModel",
    "UpdateTest",
    "closed_test",
    "evaluate_gates",
    "fit_update",
    "fit_updates",
    "update_coefficients",
]

UpdateMethod = Literal["unchanged", "intercept", "recalibrate", "refit"]
UPDATE_ORDER: tuple[UpdateMethod, ...] = ("unchanged", "intercept", "recalibrate", "refit")


@dataclass(frozen=True)
class UpdateModel:
    """One fitted update: coefficients on X, log-likelihood, parameters estimated."""

    method: str
    coef: FloatArray  # (p,)
    loglik: float
    df: int
    intercept: float  # a (0 for unchanged and refit)
    slope: float  # b (1 for unchanged and intercept; 1 for refit by convention)
    converged: bool
    n_obs: int
    n_events: float


@dataclass(frozen=True)
class UpdateTest:
    """Likelihood-ratio test of one simpler model against the refit."""

    name: str
    model: str
    statistic: float
    df: int
    p_value: float
    significant: bool


@dataclass(frozen=True)
class ClosedTestResult:
    """The closed test's choice, the tests made, every model, and plain reasons."""

    chosen: str
    coef: FloatArray  # (p,) coefficients of the chosen model
    models: tuple[UpdateModel, ...]
    tests: tuple[UpdateTest, ...]
    alpha: float
    reasons: tuple[str, ...]
    n_obs: int
    n_events: float
    method: str


def update_coefficients(
    coef_old: ArrayLike, intercept: float, slope: float = 1.0, *, intercept_index: int = 0
) -> FloatArray:
    """coef_new = slope * coef_old, then intercept element + intercept (module docstring)."""
    new = float(slope) * np.asarray(coef_old, dtype=np.float64).copy()
    new[intercept_index] += float(intercept)
    return np.asarray(new, dtype=np.float64)


def _inputs(
    X: ArrayLike, y: ArrayLike, coef_old: ArrayLike, weights: ArrayLike | None, intercept_index: int
) -> tuple[FloatArray, FloatArray, FloatArray, FloatArray | None]:
    yy = as_outcomes(y)
    XX = np.asarray(X, dtype=np.float64)
    c = np.asarray(coef_old, dtype=np.float64)
    if XX.ndim != 2 or XX.shape[0] != yy.shape[0]:
        raise DataError(
            "X must be (n, p) with one row per outcome",
            field="X",
            value=f"shape {XX.shape}",
            remedy="build X with the model's encoding",
        )
    if c.shape != (XX.shape[1],) or not np.isfinite(c).all():
        raise DataError(
            "coef_old must be finite with one value per column of X",
            field="coef_old",
            value=f"shape {c.shape}",
            remedy="pass the champion version's coefficients",
        )
    if not 0 <= intercept_index < XX.shape[1] or not np.all(XX[:, intercept_index] == 1.0):
        raise SpecError(
            "updating needs an intercept column of ones",
            field="intercept_index",
            value=intercept_index,
            remedy="encode the model with an intercept",
        )
    return XX, yy, c, as_weights(weights, yy.shape[0])


def _loglik(eta: FloatArray, y: FloatArray, w: FloatArray | None) -> float:
    """sum w (y eta - log(1 + e^eta))."""
    ll = y * eta - np.logaddexp(0.0, eta)
    return float(ll.sum() if w is None else w @ ll)


def fit_update(
    method: UpdateMethod,
    X: ArrayLike,
    y: ArrayLike,
    coef_old: ArrayLike,
    *,
    weights: ArrayLike | None = None,
    intercept_index: int = 0,
) -> UpdateModel:
    """Fit one update method (see module docstring) with riskfit's logistic engine."""
    XX, yy, c, w = _inputs(X, y, coef_old, weights, intercept_index)
    eta = XX @ c
    n, ev = int(yy.shape[0]), float(yy.sum() if w is None else w @ yy)
    if method == "unchanged":
        return UpdateModel(method, c, _loglik(eta, yy, w), 0, 0.0, 1.0, True, n, ev)
    if method == "intercept":
        f = fit_logistic(np.ones((n, 1)), yy, weights=w, offset=eta, term_names=["intercept"])
        a = float(f.coef[0])
        return UpdateModel(
            method,
            update_coefficients(c, a, 1.0, intercept_index=intercept_index),
            f.loglik,
            1,
            a,
            1.0,
            f.converged,
            n,
            ev,
        )
    if method == "recalibrate":
        f = fit_logistic(
            np.column_stack([np.ones(n), eta]), yy, weights=w, term_names=["intercept", "eta_old"]
        )
        a, b = float(f.coef[0]), float(f.coef[1])
        return UpdateModel(
            method,
            update_coefficients(c, a, b, intercept_index=intercept_index),
            f.loglik,
            2,
            a,
            b,
            f.converged,
            n,
            ev,
        )
    if method == "refit":
        f = fit_logistic(XX, yy, weights=w, intercept_index=intercept_index)
        return UpdateModel(
            method,
            np.asarray(f.coef, dtype=np.float64),
            f.loglik,
            XX.shape[1],
            0.0,
            1.0,
            f.converged,
            n,
            ev,
        )
    raise SpecError(
        "unknown update method",
        field="method",
        value=method,
        remedy="use unchanged, intercept, recalibrate or refit",
    )


def fit_updates(
    X: ArrayLike,
    y: ArrayLike,
    coef_old: ArrayLike,
    *,
    weights: ArrayLike | None = None,
    intercept_index: int = 0,
) -> tuple[UpdateModel, ...]:
    """All four nested models, in :data:`UPDATE_ORDER`."""
    return tuple(
        fit_update(m, X, y, coef_old, weights=weights, intercept_index=intercept_index)
        for m in UPDATE_ORDER
    )


def closed_test(
    X: ArrayLike,
    y: ArrayLike,
    coef_old: ArrayLike,
    *,
    weights: ArrayLike | None = None,
    alpha: float = 0.05,
    intercept_index: int = 0,
) -> ClosedTestResult:
    """Choose the smallest update not significantly worse than the refit (Vergouwe 2017)."""
    if not 0.0 < alpha < 1.0:
        raise SpecError(
            "alpha must be in (0, 1)", field="alpha", value=alpha, remedy="use e.g. 0.05"
        )
    models = fit_updates(X, y, coef_old, weights=weights, intercept_index=intercept_index)
    refit = models[-1]
    tests: list[UpdateTest] = []
    reasons: list[str] = []
    chosen = "refit"
    for m in models[:-1]:
        df = refit.df - m.df
        if df <= 0:
            reasons.append(
                f"{m.method} has as many parameters as the refit (p = {refit.df}); "
                f"it spans the same models, so {m.method} is kept without a test"
            )
            chosen = m.method
            break
        lr = max(2.0 * (refit.loglik - m.loglik), 0.0)
        pv = float(stats.chi2.sf(lr, df))
        sig = pv < alpha
        name = f"LR test {m.method} vs refit"
        tests.append(UpdateTest(name, m.method, lr, df, pv, sig))
        verdict = "significantly worse" if sig else "not significantly worse"
        reasons.append(
            f"{name}: LR = {lr:.3f} on {df} df, p = {pv:.4g}; {m.method} is "
            f"{verdict} than the refit at alpha = {alpha:g}"
        )
        if not sig:
            chosen = m.method
            break
    else:
        reasons.append("every simpler model is significantly worse: the full refit is chosen")
    if chosen == "unchanged":
        reasons.append("the champion's coefficients are kept unchanged")
    coef = next(m.coef for m in models if m.method == chosen)
    return ClosedTestResult(
        chosen,
        coef,
        models,
        tuple(tests),
        alpha,
        tuple(reasons),
        refit.n_obs,
        refit.n_events,
        "closed testing procedure (Vergouwe et al. 2017): likelihood-ratio tests against the "
        "full refit in the order unchanged, intercept, recalibrate",
    )
