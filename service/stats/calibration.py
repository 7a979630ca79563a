"""The calibration report of one window of outcomes: every measure, computed once each.

The measures themselves (methods, formulas and references) are in
:mod:`service.stats.calibration_measures`; this module assembles them with one sort of the
predictions shared by the AUC, the risk groups and the flexible curve, and re-exports them,
so ``service.stats.calibration`` stays the one import for calibration.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from service.stats._outcome_arrays import require_outcomes, weighted_sum
from service.stats._risk_groups import (
    HosmerLemeshow,
    ReliabilityGroups,
    RiskGroup,
    hosmer_lemeshow_sorted,
    reliability_sorted,
)
from service.stats.calibration_measures import (
    CalibrationParameter,
    ObservedExpected,
    ProbabilityScores,
    Spiegelhalter,
    _inputs,
    _sorted,
    calibration_intercept,
    calibration_slope,
    hosmer_lemeshow,
    observed_expected,
    probability_scores,
    reliability_groups,
    spiegelhalter_z,
)
from service.stats.discrimination import AucResult, auc_delong
from service.stats.smoothing import (
    FlexibleCalibration,
    flexible_calibration,
    flexible_calibration_sorted,
)

__all__ = [
    "CalibrationParameter",
    "CalibrationReport",
    "FlexibleCalibration",
    "HosmerLemeshow",
    "ObservedExpected",
    "ProbabilityScores",
    "ReliabilityGroups",
    "RiskGroup",
    "Spiegelhalter",
    "calibration_intercept",
    "calibration_report",
    "calibration_slope",
    "flexible_calibration",
    "hosmer_lemeshow",
    "observed_expected",
    "probability_scores",
    "reliability_groups",
    "spiegelhalter_z",
]


@dataclass(frozen=True)
class CalibrationReport:
    """Every calibration measure for one window of outcomes, with the counts behind them."""

    n_obs: int
    sum_weights: float
    n_events: float
    n_non_events: float
    confidence_level: float
    development: bool
    observed_expected: ObservedExpected
    calibration_in_the_large: CalibrationParameter
    calibration_slope: CalibrationParameter
    recalibration_intercept: CalibrationParameter
    scores: ProbabilityScores
    auc: AucResult
    hosmer_lemeshow: HosmerLemeshow
    spiegelhalter: Spiegelhalter
    reliability: ReliabilityGroups
    flexible: FlexibleCalibration


def calibration_report(
    y: ArrayLike,
    p: ArrayLike,
    *,
    weights: ArrayLike | None = None,
    min_outcomes: int = 100,
    min_events: int = 10,
    development: bool = False,
    confidence_level: float = 0.95,
    groups: int = 10,
    span: float = 0.75,
    degree: int = 2,
) -> CalibrationReport:
    """All measures for one window; NotEnoughOutcomesError below the minimum counts.

    Minimum counts (defaults: 100 outcomes, 10 events and 10 non-events) are common
    practice: below them intervals are too wide to act on.
    """
    yy, pp, w = _inputs(y, p, weights)
    n = int(yy.shape[0])
    sw = float(n) if w is None else float(w.sum())
    events = weighted_sum(yy, w)
    non_events = sw - events
    require_outcomes(
        n, events, sw, min_outcomes=min_outcomes, min_events=min_events, what="a calibration report"
    )
    slope, recal = calibration_slope(yy, pp, weights=w, confidence_level=confidence_level)
    order = np.argsort(pp)  # one sort for the AUC, the risk groups and the curve
    ps, ys, ws = _sorted(yy, pp, w, order)
    return CalibrationReport(
        n_obs=n,
        sum_weights=sw,
        n_events=events,
        n_non_events=non_events,
        confidence_level=confidence_level,
        development=development,
        observed_expected=observed_expected(yy, pp, weights=w, confidence_level=confidence_level),
        calibration_in_the_large=calibration_intercept(
            yy, pp, weights=w, confidence_level=confidence_level
        ),
        calibration_slope=slope,
        recalibration_intercept=recal,
        scores=probability_scores(yy, pp, weights=w),
        auc=auc_delong(yy, pp, weights=w, confidence_level=confidence_level, order=order),
        hosmer_lemeshow=hosmer_lemeshow_sorted(ps, ys, ws, g=groups, development=development),
        spiegelhalter=spiegelhalter_z(yy, pp, weights=w),
        reliability=reliability_sorted(ps, ys, ws, g=groups, confidence_level=confidence_level),
        flexible=flexible_calibration_sorted(
            ps, ys, ws, span=span, degree=degree, max_points=1000, grid=101
        ),
    )
