"""Fit a logistic model by (penalised) maximum likelihood over blocks of rows.

``fit_logistic`` takes arrays; ``fit_logistic_blocks`` takes a block source
(see :mod:`service.stats.blocks`), so the same mathematics fits data held in
memory, streamed from files or spread over a cluster.

Steps: one scan pass (checks, counts, X'WX for the rank test, a row sample), Newton-Raphson
(:mod:`service.stats.newton`, started by :mod:`service.stats.fit_start`) from the fit on the
sample for many rows
(:mod:`service.stats.warm_start`), else from the intercept-only ``logit(ybar)``, then the
existence checks (:mod:`service.stats.diagnostics`) and the statistics.

Definitions: deviance ``-2 loglik`` (0/1 outcomes, so the saturated
log-likelihood is 0); ``aic = -2 loglik + 2 p``; ``bic = -2 loglik + p log(sum_weights)``
(``sum_weights = n_obs`` without weights); McFadden's ``R^2 = 1 - loglik / null_loglik``.
The null model is intercept-only with the same weights and offset (offset-only if
there is no intercept). For penalised methods these use the unpenalised loglik and p.
Firth's penalised null log-likelihood (its global likelihood-ratio test) is the full
model's penalised log-likelihood restricted to the intercept, the full model's penalty
kept (:func:`firth_null`), the same rule as its drop-term tests.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass, replace
from typing import Literal

import numpy as np
from scipy.linalg import cho_factor, cho_solve

from service.errors import RankDeficientError

from .blocks import BlockSource, array_blocks
from .centring import column_shifts, shift_matrix, shifted_blocks
from .diagnostics import check_separation
from .fit_options import FitOptions, fit_options
from .fit_start import newton_from_scan
from .likelihood import DataSummary, scan
from .newton import NewtonResult, Objective, State, newton
from .null_model import FIRTH_GLOBAL_TEST_RULE, firth_null, global_test_rule, null_logliks
from .row_sample import RowSample
from .warm_start import (
    WARM_START_MIN_ROWS,
    SampleStart,
    start_for,
)

__all__ = [
    "FIRTH_GLOBAL_TEST_RULE",
    "Centring",
    "LogisticFit",
    "Method",
    "centred_view",
    "constrained_fit",
    "finish_fit",
    "firth_null",
    "fit_from_scan",
    "fit_logistic",
    "fit_logistic_blocks",
    "global_test_rule",
    "uncentred",
]

Method = Literal["mle", "firth", "ridge"]


@dataclass(frozen=True)
class Centring:
    """A fit made on centred columns (:mod:`service.stats.centring`): the constants subtracted
    (p,) and the estimate and covariance in those columns, which refits (drop-term tests,
    profiles) start from: converting back from the original columns would lose the digits
    the centring saved."""

    shift: np.ndarray
    coef: np.ndarray
    cov: np.ndarray


@dataclass(frozen=True)
class LogisticFit:
    """A fitted logistic model; arrays are (p,) or (p, p) in ``term_names`` order."""

    term_names: tuple[str, ...]
    coef: np.ndarray
    cov: np.ndarray
    std_error: np.ndarray
    loglik: float
    penalized_loglik: float
    null_loglik: float
    deviance: float
    null_deviance: float
    n_obs: int
    sum_weights: float
    n_events: float
    method: str
    ridge_lambda: float
    converged: bool
    iterations: int
    stop_reason: str
    aic: float
    bic: float
    mcfadden_r2: float
    warnings: tuple[str, ...]
    intercept_index: int | None = 0
    # intercept-only under the full model's penalty (Firth LR tests, FIRTH_GLOBAL_TEST_RULE)
    null_penalized_loglik: float = float("nan")
    centring: Centring | None = None  # set when columns far from zero were centred


def fit_logistic_blocks(
    blocks: BlockSource,
    *,
    n_terms: int,
    term_names: Sequence[str] | None = None,
    method: Method = "mle",
    ridge_lambda: float = 0.0,
    intercept_index: int | None = 0,
    max_iter: int = 100,
    tol: float = 1e-10,
    many_rows: bool = False,
    in_memory: bool = False,
) -> LogisticFit:
    """Fit by Newton-Raphson over a block source (see module docstring for definitions).

    Maximum-likelihood fits of many rows start from the fit on a systematic sample of them,
    taken during the scan (:mod:`service.stats.warm_start`), when that is the better start.
    ``many_rows`` (the caller knows there are at least
    :data:`~service.stats.warm_start.WARM_START_MIN_ROWS`, in memory): the scan then skips
    the cross-products, which the sample start does without (its rank check runs on the final
    information); should the sample give no start, a second scan computes them.
    ``in_memory`` (the blocks are in memory, so a pass costs computing, not reading): Newton
    may take rounded steps, and starts after up to
    :data:`~service.stats.warm_start.CHORD_MAX_STEPS` chord steps from the sample's maximum
    (:func:`~service.stats.fit_start.newton_from_scan`); data read from files get neither,
    since there every pass costs a read of the file whatever it computes.

    Raises SingleClassError, TooFewObservationsError, RankDeficientError,
    SeparationError (``details["terms"]``; mle only), DataError, SpecError.
    Non-convergence is reported in ``converged`` / ``stop_reason``, not raised.
    """
    opts = fit_options(n_terms, term_names, method, ridge_lambda, intercept_index, max_iter, tol)
    names = opts.names
    sample = RowSample() if method == "mle" else None
    light = sample is not None and many_rows
    summary = scan(blocks, n_terms, names, sample, cross_products=not light)
    shift = column_shifts(summary, intercept_index)
    if shift is not None:  # columns far from zero: fit on them centred (service.stats.centring)
        blocks = shifted_blocks(blocks, shift)
        sample = RowSample() if method == "mle" else None
        summary = scan(blocks, n_terms, names, sample, cross_products=not light)
    start = None
    if sample is not None:
        start = start_for(method, summary, sample.source(), sample.rows, names, intercept_index)
    if summary.xtwx is None and start is None:
        summary = scan(blocks, n_terms, names)  # the intercept-only start needs X' W X
    fit = fit_from_scan(
        lambda mask: Objective(blocks, method, ridge_lambda, mask),
        summary,
        opts,
        start=start,
        separation_blocks=lambda: blocks,
        null_logliks=lambda: null_logliks(blocks, summary, intercept_index, method),
        in_memory=in_memory,
    )
    return (
        fit if shift is None or intercept_index is None else uncentred(fit, shift, intercept_index)
    )


def uncentred(fit: LogisticFit, shift: np.ndarray, intercept_index: int) -> LogisticFit:
    """A fit made on columns ``x_j - shift_j`` expressed in the original columns:
    ``coef = A coef'``, ``cov = A cov' A'`` (:mod:`service.stats.centring`); log-likelihoods,
    counts and tests are the same for both."""
    A = shift_matrix(shift, intercept_index)
    cov = fit.cov
    if np.all(np.isfinite(cov)):
        cov = A @ cov @ A.T
        cov = 0.5 * (cov + cov.T)
    se = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    centring = Centring(shift, fit.coef, fit.cov)
    return replace(fit, coef=A @ fit.coef, cov=cov, std_error=se, centring=centring)


def centred_view(blocks: BlockSource, fit: LogisticFit) -> tuple[BlockSource, LogisticFit]:
    """``(blocks, fit)`` in the centred columns the fit was made on (as they are if it was not
    centred). Restricting non-intercept coefficients is the same in both parametrisations
    (``b_j = b'_j``), and the (penalised) log-likelihood is the same function, so refits that
    fix only such coefficients may run here, where the information is well conditioned."""
    c = fit.centring
    if c is None:
        return blocks, fit
    return shifted_blocks(blocks, c.shift), replace(fit, coef=c.coef, cov=c.cov, centring=None)


def fit_from_scan(
    make_objective: Callable[[np.ndarray], Objective],
    summary: DataSummary,
    opts: FitOptions,
    *,
    start: SampleStart | None,
    separation_blocks: Callable[[], BlockSource],
    null_logliks: Callable[[], tuple[float, float]],
    in_memory: bool = False,
) -> LogisticFit:
    """Everything after the scan, for every engine:
    :func:`~service.stats.fit_start.newton_from_scan`, then :func:`finish_fit` (see both for
    the arguments)."""
    res = newton_from_scan(make_objective, summary, opts, start=start, in_memory=in_memory)
    return finish_fit(
        summary, res, opts, separation_blocks=separation_blocks, null_logliks=null_logliks
    )


def finish_fit(
    summary: DataSummary,
    res: NewtonResult,
    opts: FitOptions,
    *,
    separation_blocks: Callable[[], BlockSource],
    null_logliks: Callable[[], tuple[float, float]],
) -> LogisticFit:
    """Turn the last Newton state into a :class:`LogisticFit` (shared by every engine).

    ``cov = I(coef)^-1`` from the (penalised) information of the last pass, symmetrised;
    ``se = sqrt(diag(cov))``. For ``mle`` the existence check runs on the blocks that
    ``separation_blocks()`` gives (an engine may gather them only then); ``null_logliks()``
    returns the intercept-only (unpenalised, penalised) log-likelihoods.
    """
    names, method, intercept_index = opts.names, opts.method, opts.intercept_index
    st = res.state
    p = st.coef.shape[0]
    try:
        cov = cho_solve(cho_factor(st.info, lower=True), np.eye(p))
    except np.linalg.LinAlgError:
        cov = np.full((p, p), np.inf)
    cov = 0.5 * (cov + cov.T)
    se = np.sqrt(np.clip(np.diag(cov), 0.0, None))
    converged = bool(res.converged)
    if method == "mle":
        suspicious = not converged or st.n_extreme > 0
        check_separation(
            separation_blocks(), summary, st.coef, se, names, intercept_index, suspicious=suspicious
        )
    stop = str(res.stop_reason)
    warnings: list[str] = []
    if not converged:
        if method == "mle":
            stop += '; diverging estimates mean quasi-separation: method="firth"'
        elif method == "firth":
            stop += "; look for nearly collinear terms or a feature on an extreme scale"
        warnings.append("not converged: " + stop)
    if st.n_extreme:
        warnings.append(f"{st.n_extreme} fitted probabilities are numerically 0 or 1")
    null_ll, null_pen = null_logliks()
    ll = st.loglik
    return LogisticFit(
        term_names=names,
        coef=st.coef,
        cov=cov,
        std_error=se,
        loglik=ll,
        penalized_loglik=st.penalized_loglik,
        null_loglik=null_ll,
        deviance=-2.0 * ll,
        null_deviance=-2.0 * null_ll,
        n_obs=summary.n_obs,
        sum_weights=summary.sum_weights,
        n_events=summary.n_events,
        method=method,
        ridge_lambda=float(opts.ridge_lambda),
        converged=converged,
        iterations=int(res.iterations),
        stop_reason=stop,
        aic=-2.0 * ll + 2.0 * p,
        bic=-2.0 * ll + p * float(np.log(summary.sum_weights)),
        mcfadden_r2=1.0 - ll / null_ll if null_ll < 0 else float("nan"),
        warnings=tuple(warnings),
        intercept_index=intercept_index,
        null_penalized_loglik=null_pen,
    )


def fit_logistic(
    X: np.ndarray,
    y: np.ndarray,
    *,
    weights: np.ndarray | None = None,
    offset: np.ndarray | None = None,
    term_names: Sequence[str] | None = None,
    method: Method = "mle",
    ridge_lambda: float = 0.0,
    intercept_index: int | None = 0,
    max_iter: int = 100,
    tol: float = 1e-10,
    block_rows: int = 65536,
) -> LogisticFit:
    """:func:`fit_logistic_blocks` over in-memory arrays (X (n, p), y (n,) in {0, 1})."""
    blocks = array_blocks(X, y, weights, offset, block_rows)
    many = np.ndim(X) == 2 and np.shape(X)[0] >= WARM_START_MIN_ROWS
    return fit_logistic_blocks(
        blocks,
        n_terms=np.shape(X)[1] if np.ndim(X) == 2 else 0,
        term_names=term_names,
        method=method,
        ridge_lambda=ridge_lambda,
        intercept_index=intercept_index,
        max_iter=max_iter,
        tol=tol,
        many_rows=many,
        in_memory=True,
    )


def constrained_fit(
    blocks: BlockSource,
    fit: LogisticFit,
    fixed: dict[int, float],
    *,
    start: np.ndarray | None = None,
    tol: float = 1e-10,
) -> State:
    """Maximise the fit's (penalised) log-likelihood with ``coef[j] = fixed[j]`` held.

    Starts at ``start`` (default the fit's estimate); the penalty is the full-model one (Firth: the
    whole information matrix), as used by profile intervals and LR tests. For a fit made on
    centred columns (``fit.centring``) with the intercept free, the refit runs in those columns
    (:func:`centred_view`) and the state's ``coef`` is returned in the original ones (its
    score and information stay in the centred ones). With the intercept fixed the original
    columns are well conditioned (the intercept is what they are collinear with).
    """
    icpt = fit.intercept_index
    if fit.centring is not None and icpt is not None and icpt not in fixed:
        A = shift_matrix(fit.centring.shift, icpt)
        cblocks, cfit = centred_view(blocks, fit)
        cstart = None if start is None else np.linalg.solve(A, start)
        st = constrained_fit(cblocks, cfit, fixed, start=cstart, tol=tol)
        return replace(st, coef=A @ st.coef)
    p = fit.coef.shape[0]
    mask = np.ones(p)
    if fit.intercept_index is not None:
        mask[fit.intercept_index] = 0.0
    obj = Objective(blocks, fit.method, fit.ridge_lambda, mask)
    coef = (fit.coef if start is None else start).astype(np.float64, copy=True)
    free = np.ones(p, bool)
    for j, v in fixed.items():
        coef[j] = v
        free[j] = False
    state = obj.evaluate(coef)
    if state is None:
        raise RankDeficientError(
            "information matrix singular in a constrained refit",
            field="X",
            value=[fit.term_names[j] for j in fixed],
            remedy="check the model for collinear terms",
        )
    return newton(obj, state, free, max_iter=200, tol=tol).state
