"""A start for Newton on many rows: the same model fitted first on a sample of the rows.

Newton-Raphson converges quadratically near the maximum, so the passes it spends are decided
by how far away it starts. From the intercept-only start a fit on 1,000,000 rows x 21 terms
takes five steps (six passes with the scan) and one on 200,000 x 101 seven; from the maximum
on a systematic sample of the rows (:mod:`service.stats.row_sample`, taken during the scan:
every 16th row, at most 65,536 rows) and one chord step from there (:func:`first_state`)
they take two and three; with the chord steps that data in memory can afford (passes without
the information), one and two, i.e. two and three passes with the information.
The sample estimate is ``O(1 / sqrt(m))`` from the full one for ``m`` sampled rows, whatever
the number of rows ``n`` (about four standard errors of the full fit for ``n = 16 m``). That
is inside the region where Newton's error squares at each step (Nocedal & Wright, *Numerical
Optimization*, 2nd ed., thm. 3.5), and the sample fit itself costs about ``6 m / n`` passes
(no reading: the sample is in memory), which also spares a streamed fit two or three reads
of its file.

The start changes nothing but the path: the full fit still runs Newton with step-halving to
the same convergence test, so it ends at the same maximum (tests/stats/test_warm_start.py
checks this against statsmodels and against the cold start). Whenever the subsample would
give a poor start (one outcome class, collinear columns in the sample, no convergence in
:data:`SAMPLE_MAX_ITER` steps, fitted probabilities of 0 or 1 in the sample, which signals
separation there) no start is returned and the caller keeps the intercept-only one; the
caller also keeps that one when the full log-likelihood at the sample estimate is lower.

Only plain maximum likelihood uses it: the ridge and Firth objectives depend on ``n`` through
the penalty's weight relative to the data, so the subsample maximiser is a different point.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Any

import numpy as np
from scipy.linalg import LinAlgError, cho_factor, cho_solve
from scipy.special import logit

from service.errors import RiskfitError

from .blocks import BlockSource
from .diagnostics import check_counts, check_rank
from .likelihood import DataSummary, scan
from .newton import Objective, State, newton, rounding_safe

__all__ = [
    "CHORD_MAX_STEPS",
    "SAMPLE_MAX_ITER",
    "SAMPLE_ROWS_PER_TERM",
    "WARM_START_MIN_ROWS",
    "SampleStart",
    "first_state",
    "sample_start",
    "worth_a_start",
]

WARM_START_MIN_ROWS = 131_072  # below this a fit takes a few tens of ms; no start is sought
SAMPLE_ROWS_PER_TERM = 100  # and no start from a sample with fewer rows per term
SAMPLE_MAX_ITER = 25
# Tight, although the estimate is some standard errors from the full maximum anyway: with
# separation in the sample the coefficients drift and Newton never meets this tolerance, which
# is how such a sample is refused (a looser one stops on the drift).
SAMPLE_TOL = 1e-8
CHORD_MAX_STEPS = 6  # chord steps before the first full pass, for data in memory
CHORD_MAX_RATIO = 0.1  # a worse contraction per chord step: Newton's full passes do better
CHORD_TARGET = 1e-4  # a predicted scaled error this small: one Newton step from there


def start_for(
    method: str,
    summary: DataSummary,
    sample: BlockSource,
    sampled_rows: int,
    names: tuple[str, ...],
    intercept_index: int | None,
) -> SampleStart | None:
    """The start every engine takes from its sample: maximum likelihood only, data of many rows
    (:func:`worth_a_start`), and a sample that gives a good start (:func:`sample_start`)."""
    if method != "mle" or not worth_a_start(summary, sampled_rows, len(names)):
        return None
    return sample_start(sample, names, intercept_index)


def worth_a_start(summary: DataSummary, sampled_rows: int, p: int) -> bool:
    """Whether to fit a sample for a start: data of :data:`WARM_START_MIN_ROWS` rows or more
    and a sample of at least :data:`SAMPLE_ROWS_PER_TERM` rows per term."""
    return summary.n_obs >= WARM_START_MIN_ROWS and sampled_rows >= SAMPLE_ROWS_PER_TERM * p


@dataclass(frozen=True)
class SampleStart:
    """The maximum on the sample: ``coef`` (p,) and the information there, ``info`` (p, p),
    as a sum over the sample's rows (``sample_weight`` their total weight)."""

    coef: np.ndarray
    info: np.ndarray
    sample_weight: float


def sample_start(
    sample: BlockSource, names: tuple[str, ...], intercept_index: int | None
) -> SampleStart | None:
    """The maximum-likelihood fit on ``sample``, or None if it is no good start.

    Call only after the full data passed :func:`service.stats.likelihood.scan`, so that the
    sample holds valid values.
    """
    p = len(names)
    try:
        summary = scan(sample, p, names)
        check_counts(summary, p)
        assert summary.xtwx is not None  # a scan with cross-products
        check_rank(summary.xtwx, names, intercept_index)
    except RiskfitError:
        return None
    mask = np.ones(p)
    coef0 = np.zeros(p)
    if intercept_index is not None:
        mask[intercept_index] = 0.0
        coef0[intercept_index] = logit(summary.n_events / summary.sum_weights)
    obj = Objective(sample, "mle", 0.0, mask)
    state0 = obj.evaluate(coef0)
    if state0 is None:
        return None
    rounded = rounding_safe(summary.xtwx, summary.sum_weights)
    res = newton(
        obj, state0, np.ones(p, bool), max_iter=SAMPLE_MAX_ITER, tol=SAMPLE_TOL, rounded=rounded
    )
    if not res.converged or res.state.n_extreme > 0 or not np.all(np.isfinite(res.state.coef)):
        return None
    return SampleStart(res.state.coef, res.state.info, summary.sum_weights)


def first_state(
    obj: Objective,
    start: SampleStart,
    sum_weights: float,
    *,
    rounded: bool = False,
    max_chord_steps: int = 1,
) -> State | None:
    """Newton's first state on the full data: chord steps from the sample's maximum.

    A chord step is a Newton step with a fixed information: here the sample's, scaled to the
    full data's total weight, ``H = (sum_weights / start.sample_weight) I_sample``. From
    ``b_0 = start.coef``: ``b_{k+1} = b_k + H^-1 g(b_k)``, each ``g`` from a pass without the
    information (about a fifth to a half of a full pass in memory, measured on 200,000 x 101
    and 1,000,000 x 11). The error contracts by a factor of about ``||I - H^-1 I||`` per step
    (the sample's information differs from the full one by ``O(sqrt(p / m))``; measured
    ``1e-3`` on 1,000,000 x 21, ``3e-2`` on 200,000 x 101), against Newton's squaring of the
    error for a full pass each (Ortega & Rheinboldt, *Iterative Solution of Nonlinear
    Equations in Several Variables*, 1970, sec. 10.1, for the chord method).

    Up to ``max_chord_steps`` steps are taken; the point reached by the last one is evaluated
    with the information and returned (``rounded``: in single precision, see
    :func:`service.stats.newton.newton`, unless the error expected there is below
    :data:`CHORD_TARGET`: that state gives the step to the maximum, which must be exact).
    The steps stop early, with that full pass, when the last contraction (ratio of successive
    scaled steps) exceeds :data:`CHORD_MAX_RATIO` or the error it predicts after the step is
    at most :data:`CHORD_TARGET`, from where one Newton step reaches the convergence test. With one
    step (for data read from files, where every pass costs a read), it is the step from
    ``b_0`` then a full pass. A step that does not increase the log-likelihood ends the steps
    with a full pass at the point before it (mle only: the ridge and Firth objectives are not
    fitted from a sample, see the module docstring).
    """
    cur = obj.evaluate_without_information(start.coef)
    chord = _chord(start, sum_weights)
    if cur is None or chord is None:
        return obj.evaluate(start.coef, rounded=rounded)
    chol, se = chord
    last: float | None = None
    steps = max(1, max_chord_steps)
    for k in range(steps):
        step = cho_solve(chol, cur.score, check_finite=False)
        if not np.all(np.isfinite(step)):
            break
        size = float(np.max(np.abs(step) / (np.abs(cur.coef) + se)))
        ratio = np.inf if last is None else size / max(last, 1e-300)
        near = min(size, ratio * size) <= CHORD_TARGET  # the error expected after the step
        slow = last is not None and ratio > CHORD_MAX_RATIO
        full = near or slow or k == steps - 1
        coef = cur.coef + step
        nxt = (
            obj.evaluate(coef, rounded=rounded and not near)
            if full
            else obj.evaluate_without_information(coef)
        )
        if nxt is None or nxt.penalized_loglik < cur.penalized_loglik:
            break
        if full:
            return nxt
        cur, last = nxt, size
    return obj.evaluate(cur.coef, rounded=rounded)


def _chord(start: SampleStart, sum_weights: float) -> tuple[Any, np.ndarray] | None:
    """Cholesky factor of the scaled sample information and the standard errors from it."""
    scaled = start.info * (sum_weights / start.sample_weight)
    try:
        chol = cho_factor(scaled, lower=True, check_finite=False)
    except LinAlgError:
        return None
    cov_diag = np.diag(cho_solve(chol, np.eye(scaled.shape[0]), check_finite=False))
    return chol, np.sqrt(np.abs(cov_diag))
