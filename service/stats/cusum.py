"""Risk-adjusted Bernoulli CUSUM (Steiner, Cook, Farewell & Treasure, Biostatistics 2000).

For outcome y_t with predicted risk p_t, the log-likelihood-ratio score for the alternative
"the odds of an event are R times the predicted odds" is::

    W_t = y_t log(R) - log(1 - p_t + R p_t)

and the chart is S_0 = 0, S_t = max(0, S_{t-1} + W_t), signalling when S_t >= h. R > 1
watches for risk *above* prediction, R < 1 for risk below it; a two-sided monitor runs one
chart of each. The recursion is evaluated without a loop over records through the Lindley
identity ``S_t = C_t - min(-S_0, min_{s<=t} C_s)`` with C the cumulative sum of W, in
chunks of records (4096, doubling while no signal occurs). After a signal the chart
restarts at 0 from the next record (the loop is over chunks and signals, not records).
The caller resets a chart (e.g. after a champion change) by passing only the records from
the reset point on (``start`` labels their indices).

Control limit. ``h`` is chosen by simulation of in-control streams: risks drawn with
replacement from a reference set of predictions (the observed or training risk
distribution), outcomes y ~ Bernoulli(p) (the model is calibrated), ``n_sims`` streams of
``max_length`` records, with a seeded generator. Because the path before the first
crossing does not depend on h, one set of paths serves every h: with M_it the running
maximum of S in stream i, the run length is RL_i(h) = 1 + #{t : M_it < h}, so

* for a target in-control average run length A, ARL(h) = 1 + mean_i #{t: M_it < h} is
  increasing in h and h is found by bisection (60 steps) on the pooled M values;
* for a target false-alarm probability alpha within a horizon N, h is the (1 - alpha)
  quantile over streams of max_{t<=N} S_it.

Runs that do not signal within ``max_length`` count as ``max_length`` (censored; the
result reports their fraction). Each chart of a two-sided monitor gets its own limit.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import ArrayLike

from service.errors import SpecError
from service.stats._outcome_arrays import FloatArray, as_outcomes, as_probabilities

__all__ = [
    "ControlLimit",
    "CusumChart",
    "TwoSidedCusum",
    "cusum",
    "cusum_scores",
    "limit_for_arl",
    "limit_for_false_alarm",
    "two_sided_cusum",
]


@dataclass(frozen=True)
class CusumChart:
    """One CUSUM chart over records ``start .. start + n_obs - 1``."""

    odds_ratio: float
    h: float
    path: FloatArray  # (n,) S_t after each record
    signals: tuple[int, ...]  # record indices (offset by start) where S_t >= h
    state: float  # S after the last record (0 if it signalled on the last record)
    start: int
    n_obs: int
    n_events: float
    expected_events: float
    restart_after_signal: bool


@dataclass(frozen=True)
class ControlLimit:
    """A control limit and how it was chosen."""

    h: float
    odds_ratio: float
    criterion: str  # "arl" | "false-alarm"
    target: float
    achieved: float
    horizon: int | None
    n_sims: int
    max_length: int
    censored_fraction: float
    seed: int
    method: str


_CHUNK = 4096  # records per first pass after a (re)start; doubles while no signal occurs


def _check_or(odds_ratio: float) -> float:
    if not (np.isfinite(odds_ratio) and odds_ratio > 0 and odds_ratio != 1.0):
        raise SpecError(
            "the CUSUM odds ratio must be positive and not 1",
            field="odds_ratio",
            value=odds_ratio,
            remedy="use e.g. 2.0 (upward) or 0.5 (downward)",
        )
    return float(odds_ratio)


def cusum_scores(y: ArrayLike, p: ArrayLike, odds_ratio: float) -> FloatArray:
    """W_t = y_t log R - log(1 - p_t + R p_t), shape (n,)."""
    R = _check_or(odds_ratio)
    yy = as_outcomes(y)
    pp = as_probabilities(p, yy.shape[0])
    return np.asarray(yy * np.log(R) - np.log1p((R - 1.0) * pp), dtype=np.float64)


def _lindley(w: FloatArray) -> FloatArray:
    """S_t = max(0, S_{t-1} + w_t), S_0 = 0, along the last axis."""
    c = np.cumsum(w, axis=-1)
    return np.asarray(c - np.minimum(np.minimum.accumulate(c, axis=-1), 0.0))


def cusum(
    y: ArrayLike,
    p: ArrayLike,
    *,
    odds_ratio: float,
    h: float,
    start: int = 0,
    restart_after_signal: bool = True,
) -> CusumChart:
    """Run one risk-adjusted CUSUM chart over outcomes ``y`` (n,) with risks ``p`` (n,)."""
    if not (np.isfinite(h) and h > 0):
        raise SpecError(
            "the control limit h must be positive",
            field="h",
            value=h,
            remedy="choose h with limit_for_arl or limit_for_false_alarm",
        )
    w = cusum_scores(y, p, odds_ratio)
    n = w.shape[0]
    path = np.empty(n)
    signals: list[int] = []
    pos, s0, size = 0, 0.0, _CHUNK
    while pos < n:  # one pass per chunk or signal, vectorised inside
        end = min(n, pos + size)
        c = np.cumsum(w[pos:end])
        seg = c - np.minimum(np.minimum.accumulate(c), -s0)  # Lindley from S = s0
        hit = np.flatnonzero(seg >= h)
        if restart_after_signal and hit.size:
            t = int(hit[0])
            path[pos : pos + t + 1] = seg[: t + 1]
            signals.append(start + pos + t)
            pos, s0, size = pos + t + 1, 0.0, _CHUNK
            continue
        path[pos:end] = seg
        signals.extend(start + pos + int(k) for k in hit)
        pos, s0, size = end, float(seg[-1]), 2 * size
    yy = np.asarray(y, dtype=np.float64)
    state = float(path[-1]) if path.size else 0.0
    if restart_after_signal and signals and signals[-1] == start + path.shape[0] - 1:
        state = 0.0
    return CusumChart(
        float(odds_ratio),
        float(h),
        path,
        tuple(signals),
        state,
        start,
        int(path.shape[0]),
        float(yy.sum()),
        float(np.asarray(p, float).sum()),
        restart_after_signal,
    )


def _running_max_paths(
    p_reference: FloatArray, R: float, n_sims: int, length: int, seed: int, chunk: int = 200
) -> np.ndarray:
    """(n_sims, length) float32 running maxima of in-control CUSUM paths.

    W is gathered per drawn reference risk (``-log(1 + (R - 1) p_j)`` computed once per
    reference record, ``log R`` added where y = 1): the same values, bit for bit, as
    evaluating the score per simulated record, without a logarithm per record.
    """
    rng = np.random.default_rng(seed)
    out = np.empty((n_sims, length), dtype=np.float32)
    w0 = -np.log1p((R - 1.0) * p_reference)  # (m,) W when y = 0
    log_r = np.log(R)
    for i in range(0, n_sims, chunk):  # loop over blocks of simulated streams
        k = min(chunk, n_sims - i)
        j = rng.integers(0, p_reference.shape[0], size=(k, length))
        yy = rng.random((k, length)) < p_reference[j]
        w = w0[j] + np.where(yy, log_r, 0.0)
        out[i : i + k] = np.maximum.accumulate(_lindley(w), axis=1)
    return out


def _reference(p_reference: ArrayLike) -> FloatArray:
    arr = np.asarray(p_reference, dtype=np.float64).ravel()
    return as_probabilities(arr, arr.shape[0], "p_reference")


def limit_for_arl(
    p_reference: ArrayLike,
    *,
    odds_ratio: float,
    target_arl: float = 1000.0,
    n_sims: int = 500,
    max_length: int | None = None,
    seed: int = 0,
) -> ControlLimit:
    """h giving in-control ARL ``target_arl`` (see module docstring); default length 10 x ARL."""
    R = _check_or(odds_ratio)
    if not target_arl > 1:
        raise SpecError(
            "target_arl must exceed 1",
            field="target_arl",
            value=target_arl,
            remedy="use e.g. 1000 records",
        )
    L = int(max_length or 10 * target_arl)
    M = _running_max_paths(_reference(p_reference), R, n_sims, L, seed)
    lo, hi = 0.0, float(M[:, -1].max()) + 1e-6

    def arl(h: float) -> float:
        return 1.0 + float(np.count_nonzero(h > M)) / n_sims

    for _ in range(60):  # bisection: ARL(h) is non-decreasing in h
        mid = 0.5 * (lo + hi)
        lo, hi = (mid, hi) if arl(mid) < target_arl else (lo, mid)
    censored = float(np.mean(hi > M[:, -1]))
    return ControlLimit(
        hi,
        R,
        "arl",
        float(target_arl),
        min(arl(hi), float(L)),
        None,
        n_sims,
        L,
        censored,
        seed,
        f"simulated in-control ARL: {n_sims} streams of {L} records, risks "
        "resampled from the reference predictions, bisection on h",
    )


def limit_for_false_alarm(
    p_reference: ArrayLike,
    *,
    odds_ratio: float,
    horizon: int = 1000,
    false_alarm_rate: float = 0.05,
    n_sims: int = 2000,
    seed: int = 0,
) -> ControlLimit:
    """h with P(signal within ``horizon`` records | in control) = ``false_alarm_rate``."""
    R = _check_or(odds_ratio)
    if not 0 < false_alarm_rate < 1:
        raise SpecError(
            "false_alarm_rate must be in (0, 1)",
            field="false_alarm_rate",
            value=false_alarm_rate,
            remedy="use e.g. 0.05",
        )
    M = _running_max_paths(_reference(p_reference), R, n_sims, int(horizon), seed)[:, -1]
    h = float(np.quantile(M.astype(np.float64), 1.0 - false_alarm_rate, method="higher"))
    h = float(np.nextafter(h, np.inf))
    achieved = float(np.mean(h <= M))
    return ControlLimit(
        h,
        R,
        "false-alarm",
        float(false_alarm_rate),
        achieved,
        int(horizon),
        n_sims,
        int(horizon),
        1.0 - achieved,
        seed,
        f"simulated in-control streams: {n_sims} of {horizon} records, risks "
        "resampled from the reference predictions; h = upper "
        f"{false_alarm_rate:g} quantile of the maximum of S",
    )


@dataclass(frozen=True)
class TwoSidedCusum:
    """An upward (R > 1) and a downward (R < 1) chart over the same records."""

    up: CusumChart
    down: CusumChart
    limit_up: ControlLimit
    limit_down: ControlLimit
    signalled: bool
    first_signal: int | None


def two_sided_cusum(
    y: ArrayLike,
    p: ArrayLike,
    p_reference: ArrayLike,
    *,
    odds_ratio_up: float = 2.0,
    odds_ratio_down: float = 0.5,
    horizon: int = 1000,
    false_alarm_rate: float = 0.05,
    n_sims: int = 2000,
    seed: int = 0,
    start: int = 0,
) -> TwoSidedCusum:
    """Two charts, each with limit for ``false_alarm_rate / 2`` within ``horizon`` records.

    Splitting the rate in half (Bonferroni) keeps the chance that *either* chart signals
    falsely within the horizon at or below ``false_alarm_rate``.
    """
    lim_up = limit_for_false_alarm(
        p_reference,
        odds_ratio=odds_ratio_up,
        horizon=horizon,
        false_alarm_rate=false_alarm_rate / 2,
        n_sims=n_sims,
        seed=seed,
    )
    lim_dn = limit_for_false_alarm(
        p_reference,
        odds_ratio=odds_ratio_down,
        horizon=horizon,
        false_alarm_rate=false_alarm_rate / 2,
        n_sims=n_sims,
        seed=seed + 1,
    )
    up = cusum(y, p, odds_ratio=odds_ratio_up, h=lim_up.h, start=start)
    dn = cusum(y, p, odds_ratio=odds_ratio_down, h=lim_dn.h, start=start)
    firsts = [c.signals[0] for c in (up, dn) if c.signals]
    return TwoSidedCusum(up, dn, lim_up, lim_dn, bool(firsts), min(firsts) if firsts else None)
