"""Calibration of predicted risks against observed outcomes: the individual measures.

The report that assembles them for one window is :mod:`service.stats.calibration`.

Inputs are outcomes ``y`` (n,) in {0, 1}, predicted probabilities ``p`` (n,) and optional
frequency ``weights`` (n,). Each measure carries its method and counts; intervals carry
their confidence level. Measures (calibration hierarchy: Van Calster et al., J Clin
Epidemiol 2016; Steyerberg, *Clinical Prediction Models*, 2nd ed. 2019):

* O/E: O = sum w y, E = sum w p; interval from the exact Poisson (Garwood 1936) limits for
  O with E held fixed, as for a standardised ratio (Breslow & Day 1987, vol. II, ch. 2):
  ``[chi2_{a/2}(2O) / 2, chi2_{1-a/2}(2O + 2) / 2] / E`` (lower limit 0 when O = 0), then
  made to contain O/E exactly in floating point.
* calibration-in-the-large: intercept a of ``logit P(y=1) = a + logit(p)`` (offset);
  calibration slope: b of ``logit P(y=1) = a' + b logit(p)``; both by maximum likelihood
  (riskfit's own Newton-Raphson for these one- and two-parameter logistic models,
  :mod:`service.stats._calibration_fit`), Wald intervals. (p is clipped into
  [1e-12, 1 - 1e-12].) No finite estimate (all outcomes equal, or logit(p) separating them):
  NaN with ``converged = False``.
* Brier = mean w (y - p)^2; scaled Brier = 1 - Brier / (ybar (1 - ybar)), ybar = O / sum w;
  log loss = -mean w (y log p + (1 - y) log(1 - p)) (p clipped as above).
* Hosmer–Lemeshow and reliability groups: see :mod:`service.stats._risk_groups`.
* Spiegelhalter's z (Spiegelhalter, Stat Med 1986)::

      z = sum w (y - p)(1 - 2p) / sqrt(sum w (1 - 2p)^2 p (1 - p)),   two-sided normal p-value

* flexible calibration curve: loess of y on p (:mod:`service.stats.smoothing`), and with
  d_i = |curve(p_i) - p_i|: ICI = weighted mean of d, E50, E90 = its median and 90th
  percentile, Emax = its maximum (Austin & Steyerberg, Stat Med 2019).
"""

from __future__ import annotations

from dataclasses import dataclass
from statistics import NormalDist

import numpy as np
from numpy.typing import ArrayLike
from scipy import stats

from service.stats._calibration_fit import fit_intercept, fit_slope
from service.stats._outcome_arrays import (
    PROB_FLOOR,
    FloatArray,
    as_outcomes,
    as_probabilities,
    as_weights,
    clipped_logit,
    weighted_sum,
)
from service.stats._risk_groups import (
    HosmerLemeshow,
    ReliabilityGroups,
    hosmer_lemeshow_sorted,
    reliability_sorted,
)
from service.stats.metrics import brier, log_loss

__all__ = [
    "CalibrationParameter",
    "ObservedExpected",
    "ProbabilityScores",
    "Spiegelhalter",
    "calibration_intercept",
    "calibration_slope",
    "hosmer_lemeshow",
    "observed_expected",
    "probability_scores",
    "reliability_groups",
    "spiegelhalter_z",
]

WALD = "Wald interval from the maximum-likelihood fit"


@dataclass(frozen=True)
class ObservedExpected:
    """Observed and expected events and rates, and O/E with an exact Poisson interval."""

    observed: float
    expected: float
    observed_rate: float
    expected_rate: float
    ratio: float
    ci_lower: float
    ci_upper: float
    confidence_level: float
    ci_method: str
    n_obs: int
    sum_weights: float


@dataclass(frozen=True)
class CalibrationParameter:
    """One coefficient of a calibration model (intercept or slope) with a Wald interval."""

    name: str
    estimate: float
    std_error: float
    ci_lower: float
    ci_upper: float
    confidence_level: float
    ci_method: str
    model: str
    converged: bool
    n_obs: int
    n_events: float


@dataclass(frozen=True)
class ProbabilityScores:
    """Brier score, its maximum ybar (1 - ybar), scaled Brier and log loss."""

    brier: float
    brier_max: float
    scaled_brier: float
    log_loss: float
    method: str
    n_obs: int
    n_events: float


@dataclass(frozen=True)
class Spiegelhalter:
    """Spiegelhalter's z test of calibration."""

    z: float
    p_value: float
    method: str
    n_obs: int
    n_events: float


def _inputs(
    y: ArrayLike, p: ArrayLike, weights: ArrayLike | None
) -> tuple[FloatArray, FloatArray, FloatArray | None]:
    yy = as_outcomes(y)
    return yy, as_probabilities(p, yy.shape[0]), as_weights(weights, yy.shape[0])


def _z(confidence_level: float) -> float:
    return NormalDist().inv_cdf(0.5 + confidence_level / 2.0)  # stdlib: no scipy call overhead


def observed_expected(
    y: ArrayLike, p: ArrayLike, *, weights: ArrayLike | None = None, confidence_level: float = 0.95
) -> ObservedExpected:
    """O/E ratio with the exact Poisson interval for O (E fixed); see module docstring."""
    yy, pp, w = _inputs(y, p, weights)
    sw = float(yy.shape[0]) if w is None else float(w.sum())
    o, e = weighted_sum(yy, w), weighted_sum(pp, w)
    a = 1.0 - confidence_level
    lo = float(stats.chi2.ppf(a / 2, 2 * o) / 2) if o > 0 else 0.0
    hi = float(stats.chi2.ppf(1 - a / 2, 2 * o + 2) / 2)
    ratio = o / e
    return ObservedExpected(
        o,
        e,
        o / sw,
        e / sw,
        ratio,
        min(lo / e, ratio),  # exactly 0 at O = 0; never above the estimate after rounding
        max(hi / e, ratio),
        confidence_level,
        "exact Poisson (Garwood) limits for O, E fixed",
        int(yy.shape[0]),
        sw,
    )


def _parameter(
    name: str,
    model: str,
    estimate: float,
    se: float,
    converged: bool,
    n: int,
    events: float,
    confidence_level: float,
) -> CalibrationParameter:
    half = _z(confidence_level) * se
    return CalibrationParameter(
        name,
        estimate,
        se,
        estimate - half,
        estimate + half,
        confidence_level,
        WALD,
        model,
        converged,
        n,
        events,
    )


def calibration_intercept(
    y: ArrayLike, p: ArrayLike, *, weights: ArrayLike | None = None, confidence_level: float = 0.95
) -> CalibrationParameter:
    """Calibration-in-the-large: intercept of logit P(y=1) = a + logit(p) (offset)."""
    yy, pp, w = _inputs(y, p, weights)
    fit = fit_intercept(yy, clipped_logit(pp), w)
    return _parameter(
        "calibration-in-the-large",
        "logit P(y=1) = a + offset logit(p)",
        fit.coef[0],
        fit.std_error[0],
        fit.converged,
        fit.n_obs,
        fit.n_events,
        confidence_level,
    )


def calibration_slope(
    y: ArrayLike,
    p: ArrayLike,
    *,
    weights: ArrayLike | None = None,
    confidence_level: float = 0.95,
) -> tuple[CalibrationParameter, CalibrationParameter]:
    """(slope b, intercept a') of logit P(y=1) = a' + b logit(p)."""
    yy, pp, w = _inputs(y, p, weights)
    fit = fit_slope(yy, clipped_logit(pp), w)
    model = "logit P(y=1) = a + b logit(p)"
    return (
        _parameter(
            "calibration slope",
            model,
            fit.coef[1],
            fit.std_error[1],
            fit.converged,
            fit.n_obs,
            fit.n_events,
            confidence_level,
        ),
        _parameter(
            "recalibration intercept",
            model,
            fit.coef[0],
            fit.std_error[0],
            fit.converged,
            fit.n_obs,
            fit.n_events,
            confidence_level,
        ),
    )


def probability_scores(
    y: ArrayLike, p: ArrayLike, *, weights: ArrayLike | None = None
) -> ProbabilityScores:
    """Brier, scaled Brier and log loss (see module docstring)."""
    yy, pp, w = _inputs(y, p, weights)
    sw = float(yy.shape[0]) if w is None else float(w.sum())
    o = weighted_sum(yy, w)
    ybar = o / sw
    b = brier(yy, pp, w)
    bmax = ybar * (1.0 - ybar)
    ll = log_loss(yy, np.clip(pp, PROB_FLOOR, 1.0 - PROB_FLOOR), w)
    scaled = 1.0 - b / bmax if bmax > 0 else float("nan")
    return ProbabilityScores(
        b,
        bmax,
        scaled,
        ll,
        "Brier = mean (y - p)^2; scaled = 1 - Brier / (ybar (1 - ybar)); "
        "log loss natural log, p clipped to [1e-12, 1 - 1e-12]",
        int(yy.shape[0]),
        o,
    )


def spiegelhalter_z(
    y: ArrayLike, p: ArrayLike, *, weights: ArrayLike | None = None
) -> Spiegelhalter:
    """Spiegelhalter's z and its two-sided normal p-value (z = 0 if the variance is 0)."""
    yy, pp, w = _inputs(y, p, weights)
    c = 1.0 - 2.0 * pp
    num = weighted_sum((yy - pp) * c, w)
    var = weighted_sum(c * c * pp * (1.0 - pp), w)
    z = num / np.sqrt(var) if var > 0 else 0.0
    return Spiegelhalter(
        float(z),
        float(2 * stats.norm.sf(abs(z))),
        "Spiegelhalter (1986) z, two-sided normal p-value",
        int(yy.shape[0]),
        weighted_sum(yy, w),
    )


def _sorted(
    yy: FloatArray, pp: FloatArray, w: FloatArray | None, o: np.ndarray | None = None
) -> tuple[FloatArray, FloatArray, FloatArray | None]:
    o = np.argsort(pp) if o is None else o
    return pp[o], yy[o], None if w is None else w[o]


def hosmer_lemeshow(
    y: ArrayLike,
    p: ArrayLike,
    *,
    weights: ArrayLike | None = None,
    groups: int = 10,
    development: bool = False,
) -> HosmerLemeshow:
    """Hosmer–Lemeshow test; df = groups - 2 if ``development`` else groups."""
    ps, ys, ws = _sorted(*_inputs(y, p, weights))
    return hosmer_lemeshow_sorted(ps, ys, ws, g=groups, development=development)


def reliability_groups(
    y: ArrayLike,
    p: ArrayLike,
    *,
    weights: ArrayLike | None = None,
    groups: int = 10,
    confidence_level: float = 0.95,
) -> ReliabilityGroups:
    """Reliability groups (mean predicted, observed rate, Wilson interval)."""
    ps, ys, ws = _sorted(*_inputs(y, p, weights))
    return reliability_sorted(ps, ys, ws, g=groups, confidence_level=confidence_level)
