"""Champion–challenger gates on a holdout (re-exported by :mod:`service.stats.updating`).

Per record i (frequency weight w_i), with champion prediction c_i and challenger q_i:

* log loss: d_i = l(q_i) - l(c_i), l(p) = -(y log p + (1 - y) log(1 - p)); mean difference
  D = sum w d / W with a paired normal-approximation interval D -/+ z SE,
  SE = sqrt(sum w (d - D)^2 / (W - 1) / W). Passes when the interval's upper bound is below
  ``log_loss_margin`` (the challenger is significantly better), or, with
  ``require_significant_log_loss=False``, when D < ``log_loss_margin``;
* Brier: the same paired difference of squared errors; passes when the difference is at
  most ``brier_margin``;
* calibration slope of the challenger on the holdout (logistic model on logit(q));
  passes when inside ``slope_bounds``;
* AUC: challenger minus champion by the paired DeLong difference; passes when the
  difference is at least ``-auc_margin``.

The challenger passes only if every gate passes. Defaults are in :class:`GateConfig`.
"""

from __future__ import annotations

from dataclasses import asdict, dataclass
from typing import Any

import numpy as np
from numpy.typing import ArrayLike
from scipy import stats

from service.errors import SpecError
from service.stats._outcome_arrays import (
    PROB_FLOOR,
    FloatArray,
    as_outcomes,
    as_probabilities,
    as_weights,
    require_outcomes,
)
from service.stats.calibration import calibration_slope
from service.stats.discrimination import auc_difference

PAIRED = "paired normal approximation on per-record differences (challenger - champion)"


@dataclass(frozen=True)
class GateConfig:
    """Gate thresholds; the defaults are riskfit's documented choices (common practice)."""

    confidence_level: float = 0.95
    log_loss_margin: float = 0.0
    require_significant_log_loss: bool = True
    brier_margin: float = 0.0
    slope_bounds: tuple[float, float] = (0.8, 1.2)
    auc_margin: float = 0.02
    min_outcomes: int = 100
    min_events: int = 10

    def __post_init__(self) -> None:
        lo, hi = self.slope_bounds
        if not (0.0 < self.confidence_level < 1.0 and lo < hi and self.auc_margin >= 0):
            raise SpecError(
                "gate configuration is inconsistent",
                field="gates",
                value=repr(self),
                remedy="use 0 < confidence_level < 1, slope_bounds low < high and auc_margin >= 0",
            )

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


@dataclass(frozen=True)
class GateResult:
    """One gate: pass/fail, the value tested, its threshold(s), interval and a reason."""

    name: str
    passed: bool
    value: float
    threshold_lower: float | None
    threshold_upper: float | None
    ci_lower: float | None
    ci_upper: float | None
    method: str
    reason: str


@dataclass(frozen=True)
class GateReport:
    """All gates on one holdout."""

    passed: bool
    gates: tuple[GateResult, ...]
    confidence_level: float
    n_obs: int
    n_events: float
    config: GateConfig


def _paired(d: FloatArray, w: FloatArray | None, z: float) -> tuple[float, float, float]:
    ww = np.ones_like(d) if w is None else w
    W = float(ww.sum())
    mean = float(ww @ d / W)
    se = float(np.sqrt(ww @ (d - mean) ** 2 / (W - 1.0) / W))
    return mean, mean - z * se, mean + z * se


def _log_loss_terms(y: FloatArray, p: FloatArray) -> FloatArray:
    q = np.clip(p, PROB_FLOOR, 1.0 - PROB_FLOOR)
    return np.asarray(-(y * np.log(q) + (1.0 - y) * np.log1p(-q)), dtype=np.float64)


def evaluate_gates(
    y: ArrayLike,
    p_champion: ArrayLike,
    p_challenger: ArrayLike,
    config: GateConfig | None = None,
    *,
    weights: ArrayLike | None = None,
) -> GateReport:
    """Compare challenger with champion on holdout outcomes ``y`` (n,); see module docstring."""
    cfg = config or GateConfig()
    yy = as_outcomes(y)
    n = int(yy.shape[0])
    pc = as_probabilities(p_champion, n, "p_champion")
    pq = as_probabilities(p_challenger, n, "p_challenger")
    w = as_weights(weights, n)
    sw = float(n if w is None else w.sum())
    events = float(yy.sum() if w is None else w @ yy)
    require_outcomes(
        n,
        events,
        sw,
        min_outcomes=cfg.min_outcomes,
        min_events=cfg.min_events,
        what="the champion-challenger gates",
    )
    z = float(stats.norm.ppf(0.5 + cfg.confidence_level / 2))
    gates: list[GateResult] = []

    ll, ll_lo, ll_hi = _paired(_log_loss_terms(yy, pq) - _log_loss_terms(yy, pc), w, z)
    tested = ll_hi if cfg.require_significant_log_loss else ll
    what = "upper confidence bound" if cfg.require_significant_log_loss else "mean difference"
    ok = tested < cfg.log_loss_margin
    gates.append(
        GateResult(
            "log_loss",
            ok,
            ll,
            None,
            cfg.log_loss_margin,
            ll_lo,
            ll_hi,
            PAIRED,
            f"log-loss difference {ll:+.5f} ({ll_lo:+.5f} to {ll_hi:+.5f}); {what} "
            f"{'below' if ok else 'not below'} {cfg.log_loss_margin:g}",
        )
    )

    br, br_lo, br_hi = _paired((pq - yy) ** 2 - (pc - yy) ** 2, w, z)
    ok = br <= cfg.brier_margin
    gates.append(
        GateResult(
            "brier",
            ok,
            br,
            None,
            cfg.brier_margin,
            br_lo,
            br_hi,
            PAIRED,
            f"Brier difference {br:+.5f} {'within' if ok else 'above'} margin {cfg.brier_margin:g}",
        )
    )

    slope, _ = calibration_slope(yy, pq, weights=w, confidence_level=cfg.confidence_level)
    lo, hi = cfg.slope_bounds
    ok = lo <= slope.estimate <= hi
    gates.append(
        GateResult(
            "calibration_slope",
            ok,
            slope.estimate,
            lo,
            hi,
            slope.ci_lower,
            slope.ci_upper,
            "challenger's calibration slope on the holdout; " + slope.ci_method,
            f"challenger calibration slope {slope.estimate:.3f} "
            f"{'inside' if ok else 'outside'} [{lo:g}, {hi:g}]",
        )
    )

    auc = auc_difference(yy, pc, pq, weights=w, confidence_level=cfg.confidence_level)
    ok = auc.difference >= -cfg.auc_margin
    gates.append(
        GateResult(
            "auc",
            ok,
            auc.difference,
            -cfg.auc_margin,
            None,
            auc.ci_lower,
            auc.ci_upper,
            auc.ci_method,
            f"AUC {auc.auc_b:.4f} vs champion {auc.auc_a:.4f} (difference {auc.difference:+.4f}); "
            f"{'not worse' if ok else 'worse'} than the margin {cfg.auc_margin:g}",
        )
    )

    return GateReport(
        all(g.passed for g in gates), tuple(gates), cfg.confidence_level, n, events, cfg
    )
