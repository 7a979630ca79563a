"""A start for Newton on many rows: the same model fitted first on a sample of the rows.

Newton-Raphson converges quadratically near the maximum, so the passes it spends are decided
by how far away it starts. From the intercept-only start a fit on 1,000,000 rows x 21 terms
takes five steps (six passes with the scan) and one on 200,000 x 101 seven; from the maximum
on a systematic sample of the rows (:mod:`service.stats.row_sample`, taken during the scan:
every 16th row, at most 65,536 rows) and one chord step from there (:func:`first_state`)
they take two and three.
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

import numpy as np
from scipy.linalg import LinAlgError, cho_factor, cho_solve
from scipy.special import logit

from service.errors import RiskfitError

from .blocks import BlockSource
from .diagnostics import check_counts, check_rank
from .likelihood import DataSummary, scan
from .newton import Objective, State, newton

__all__ = [
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
        check_rank(summary.xtwx, names)
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
    res = newton(obj, state0, np.ones(p, bool), max_iter=SAMPLE_MAX_ITER, tol=SAMPLE_TOL)
    if not res.converged or res.state.n_extreme > 0 or not np.all(np.isfinite(res.state.coef)):
        return None
    return SampleStart(res.state.coef, res.state.info, summary.sum_weights)


def first_state(obj: Objective, start: SampleStart, sum_weights: float) -> State | None:
    """Newton's first state on the full data: one chord step from the sample's maximum.

    A pass without the information gives the full data's score ``g`` at ``start.coef``; the
    step ``(n / m I_sample)^-1 g``, with the sample's information scaled to the full data's
    total weight (``sum_weights / start.sample_weight``), takes out most of the sample's error
    (the information of the sample differs from the full one by ``O(sqrt(p / m))``), so Newton
    from there needs one step less than from ``start.coef``, for the price of a pass without
    the information (about half a full one; measured on 1,000,000 x 21: 0.23 -> 0.19 s for
    the Newton part; on 200,000 x 101: 0.34 -> 0.24 s). Falls back to a full pass at
    ``start.coef`` when the step does not increase the log-likelihood (mle only: the ridge
    and Firth objectives are not fitted from a sample, see the module docstring).
    """
    at_start = obj.evaluate_without_information(start.coef)
    if at_start is not None:
        scaled = start.info * (sum_weights / start.sample_weight)
        try:
            step = cho_solve(cho_factor(scaled, lower=True, check_finite=False), at_start.score)
        except LinAlgError:
            step = None
        if step is not None and np.all(np.isfinite(step)):
            state = obj.evaluate(start.coef + step)
            if state is not None and state.penalized_loglik >= at_start.penalized_loglik:
                return state
    return obj.evaluate(start.coef)
