"""Groups of predicted risk: Hosmer–Lemeshow test and reliability (calibration-plot) groups.

Grouping rule ("deciles of risk", Hosmer, Lemeshow & Sturdivant, *Applied Logistic
Regression*, 3rd ed. 2013, section 5.2.2), stated exactly because implementations differ:

1. records are sorted by predicted risk p;
2. a record whose cumulative weight *before* it is c gets tentative group
   ``floor(g * c / W)`` (W = total weight), i.e. equal-weight groups in sorted order;
3. ties are kept together: every record with the same p takes the group of the first
   record of its tie run, so a group can grow or vanish;
4. empty groups are dropped; ``n_groups`` is the number left (it can be < g).

Hosmer–Lemeshow statistic over the groups k with n_k records, O_k events and
E_k = sum of p::

    C = sum_k (O_k - E_k)^2 / (E_k (1 - E_k / n_k))

referred to chi-square with ``n_groups - 2`` degrees of freedom on the data the model was
developed on, and ``n_groups`` on external (validation) data, where no parameters were
estimated from the data tested (Hosmer, Lemeshow & Sturdivant 2013, section 5.2.2).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy import stats

from service.stats._outcome_arrays import FloatArray

GROUPING_RULE = (
    "equal-weight groups of records sorted by predicted risk; tied predictions kept in the "
    "group of the first of them; empty groups dropped"
)
WILSON = "Wilson score interval (Wilson 1927)"


@dataclass(frozen=True)
class RiskGroup:
    """One group of predicted risk with observed events and a Wilson interval for its rate."""

    index: int
    p_min: float
    p_max: float
    n_obs: int
    sum_weights: float
    events: float
    expected: float
    mean_predicted: float
    observed_rate: float
    ci_lower: float
    ci_upper: float


@dataclass(frozen=True)
class HosmerLemeshow:
    """Hosmer–Lemeshow goodness-of-fit test (see module docstring for the exact rule)."""

    statistic: float
    df: int
    p_value: float | None  # None when df <= 0 (too few distinct predictions)
    n_groups: int
    groups_requested: int
    development: bool
    grouping: str
    groups: tuple[RiskGroup, ...]
    n_obs: int
    n_events: float


@dataclass(frozen=True)
class ReliabilityGroups:
    """Mean predicted risk against observed rate per group, for a reliability diagram."""

    groups: tuple[RiskGroup, ...]
    confidence_level: float
    ci_method: str
    grouping: str
    n_obs: int
    n_events: float


def wilson_interval(events: FloatArray, n: FloatArray, z: float) -> tuple[FloatArray, FloatArray]:
    """Wilson score interval (Wilson 1927) for proportions k/n, k = ``events`` (m,), n > 0 (m,).

    Written as (Agresti & Coull, Am Stat 1998, eq. 2, rearranged)::

        lower, upper = (k + z^2/2 -/+ z sqrt(k (n - k) / n + z^2/4)) / (n + z^2)

    which is the textbook centre -/+ half-width with the common factor taken out. The
    limits are then made to contain the estimate exactly: lower = 0 when k = 0, upper = 1
    when k = n, and ``lower <= k/n <= upper`` elementwise in floating point (rounding alone
    can otherwise put a limit a few ulps on the wrong side of the estimate at the edges).
    Works for non-integer (weighted) k in [0, n].
    """
    phat = events / n
    zz = z * z
    denom = n + zz
    centre = events + zz / 2.0
    half = z * np.sqrt(np.maximum(events * (n - events) / n, 0.0) + zz / 4.0)
    lo = np.where(events <= 0.0, 0.0, np.minimum(np.clip((centre - half) / denom, 0.0, 1.0), phat))
    hi = np.where(events >= n, 1.0, np.maximum(np.clip((centre + half) / denom, 0.0, 1.0), phat))
    return lo, hi


def risk_groups(
    ps: FloatArray, ys: FloatArray, ws: FloatArray | None, g: int, confidence_level: float
) -> tuple[RiskGroup, ...]:
    """Groups of *sorted* predictions ``ps`` (n,) with outcomes ``ys`` (n,) and weights."""
    n = ps.shape[0]
    if ws is None:  # unit weights: the weight before record i is i
        before: FloatArray = np.arange(n, dtype=np.float64)
        total = float(n)
    else:
        before, total = np.cumsum(ws) - ws, float(ws.sum())
    tentative = np.minimum((g * before / total).astype(np.int64), g - 1)
    new_run = np.r_[True, ps[1:] != ps[:-1]]
    first = np.maximum.accumulate(np.where(new_run, np.arange(n), 0))  # each run's first record
    group = tentative[first]  # ties take their first record's group
    starts = np.flatnonzero(np.r_[True, group[1:] != group[:-1]])
    n_obs = np.diff(np.r_[starts, n])
    if ws is None:
        sw = n_obs.astype(np.float64)
        events = np.add.reduceat(ys, starts)
        expected = np.add.reduceat(ps, starts)
    else:
        sw = np.add.reduceat(ws, starts)
        events = np.add.reduceat(ws * ys, starts)
        expected = np.add.reduceat(ws * ps, starts)
    ok = sw > 0
    sw_safe = np.where(ok, sw, 1.0)
    z = float(stats.norm.ppf(0.5 + confidence_level / 2))
    lo, hi = wilson_interval(events, sw_safe, z)
    ends = np.r_[starts[1:], ps.shape[0]] - 1
    return tuple(
        RiskGroup(
            k,
            float(ps[starts[i]]),
            float(ps[ends[i]]),
            int(n_obs[i]),
            float(sw[i]),
            float(events[i]),
            float(expected[i]),
            float(expected[i] / sw_safe[i]),
            float(events[i] / sw_safe[i]),
            float(lo[i]),
            float(hi[i]),
        )
        for k, i in enumerate(np.flatnonzero(ok))
    )


def hosmer_lemeshow_sorted(
    ps: FloatArray,
    ys: FloatArray,
    ws: FloatArray | None,
    *,
    g: int = 10,
    development: bool = False,
) -> HosmerLemeshow:
    """Hosmer–Lemeshow test on sorted predictions (see module docstring)."""
    groups = risk_groups(ps, ys, ws, g, 0.95)
    o = np.array([r.events for r in groups])
    e = np.array([r.expected for r in groups])
    n = np.array([r.sum_weights for r in groups])
    v = e * (1.0 - e / n)
    terms = np.where(v > 0, (o - e) ** 2 / np.where(v > 0, v, 1.0), 0.0)
    stat = float(terms.sum())
    df = len(groups) - 2 if development else len(groups)
    p_value = float(stats.chi2.sf(stat, df)) if df > 0 else None
    n_events = float(o.sum())
    return HosmerLemeshow(
        stat,
        df,
        p_value,
        len(groups),
        g,
        development,
        GROUPING_RULE,
        groups,
        int(ps.shape[0]),
        n_events,
    )


def reliability_sorted(
    ps: FloatArray,
    ys: FloatArray,
    ws: FloatArray | None,
    *,
    g: int = 10,
    confidence_level: float = 0.95,
) -> ReliabilityGroups:
    """Reliability groups on sorted predictions, each with a Wilson interval."""
    groups = risk_groups(ps, ys, ws, g, confidence_level)
    return ReliabilityGroups(
        groups,
        confidence_level,
        WILSON,
        GROUPING_RULE,
        int(ps.shape[0]),
        float(sum(r.events for r in groups)),
    )
