"""A start for Newton on many rows: the same model fitted first on every k-th row.

Newton-Raphson converges quadratically near the maximum, so the passes it spends are decided
by how far away it starts. From the intercept-only start a fit on 1,000,000 rows x 21 terms
takes five steps (six passes with the scan) and one on 200,000 x 101 seven; from the maximum
on a systematic subsample of ``n / k`` rows they take three and four (plus the pass at the
start). The subsample estimate is ``O(sqrt(k / n))`` from the full one
(a few standard errors for k = 16), inside the region where Newton's error squares at each
step (Nocedal & Wright, *Numerical Optimization*, 2nd ed., thm. 3.5), and the subsample fit
itself costs about ``6 / k`` passes.

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

import numpy as np
from scipy.special import logit

from service.errors import RiskfitError

from .blocks import BlockSource, array_blocks
from .diagnostics import check_counts, check_rank
from .likelihood import scan
from .newton import Objective, newton

__all__ = [
    "SAMPLE_MAX_ITER",
    "SAMPLE_ROWS_PER_TERM",
    "STRIDE",
    "WARM_START_MIN_ROWS",
    "sample_blocks",
    "sample_start",
]

WARM_START_MIN_ROWS = 131_072  # below this a fit takes a few tens of ms; no start is sought
SAMPLE_ROWS_PER_TERM = 100  # and no start from a sample with fewer rows per term
STRIDE = 16  # every 16th row: the sample fit costs ~6/16 of a pass and starts ~4 SE away
SAMPLE_MAX_ITER = 25


def sample_blocks(
    X: np.ndarray,
    y: np.ndarray,
    weights: np.ndarray | None,
    offset: np.ndarray | None,
) -> BlockSource | None:
    """Every :data:`STRIDE`-th row as a block source (copies), or None for small data.

    None below :data:`WARM_START_MIN_ROWS` rows, or when the sample would have fewer than
    :data:`SAMPLE_ROWS_PER_TERM` rows per column of X.
    """
    if np.ndim(X) != 2:
        return None
    n, p = np.shape(X)
    if n < WARM_START_MIN_ROWS or n // STRIDE < SAMPLE_ROWS_PER_TERM * p:
        return None

    def pick(a: np.ndarray | None) -> np.ndarray | None:
        return None if a is None else np.ascontiguousarray(np.asarray(a)[::STRIDE])

    y_s = pick(y)
    assert y_s is not None
    return array_blocks(np.ascontiguousarray(X[::STRIDE]), y_s, pick(weights), pick(offset))


def sample_start(
    sample: BlockSource, names: tuple[str, ...], intercept_index: int | None
) -> np.ndarray | None:
    """The maximum-likelihood estimate on ``sample`` (p,), or None if it is no good start.

    Call only after the full data passed :func:`service.stats.likelihood.scan`, so that the
    sample holds valid values.
    """
    p = len(names)
    try:
        summary = scan(sample, p, names)
        check_counts(summary, p)
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
    res = newton(obj, state0, np.ones(p, bool), max_iter=SAMPLE_MAX_ITER, tol=1e-8)
    if not res.converged or res.state.n_extreme > 0 or not np.all(np.isfinite(res.state.coef)):
        return None
    return res.state.coef
