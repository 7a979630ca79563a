"""Newton after the scan, for every engine: existence checks, the start, then Newton.

The start is the intercept-only ``logit(ybar)`` (its log-likelihood, score and information
from the scan's sums, with no pass, when there is no offset) or, for many rows, the state
reached from the maximum on a sample of the rows (:mod:`service.stats.warm_start`). Data in
memory also allow rounded Newton steps (:mod:`service.stats.newton`) and several chord steps.
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from scipy.special import logit

from service.errors import RankDeficientError

from .diagnostics import check_counts, check_rank
from .fit_options import FitOptions
from .likelihood import DataSummary, Totals
from .newton import NewtonResult, Objective, newton, rounding_safe
from .warm_start import CHORD_MAX_STEPS, SampleStart, first_state

__all__ = ["newton_from_scan"]


def newton_from_scan(
    make_objective: Callable[[np.ndarray], Objective],
    summary: DataSummary,
    opts: FitOptions,
    *,
    start: SampleStart | None = None,
    in_memory: bool = False,
) -> NewtonResult:
    """Existence checks on the scan, then Newton from the intercept-only start (every engine).

    ``make_objective(penalty_mask)`` builds the engine's objective; the mask is 1 for every
    penalised coefficient (all but the intercept). Without an offset the start state comes from
    the scan's sums, with no pass. A ``start`` (the maximum on a sample of the rows) costs
    passes without the information and one with it
    (:func:`~service.stats.warm_start.first_state`: one chord step, or up to
    :data:`~service.stats.warm_start.CHORD_MAX_STEPS` ``in_memory``, where a pass without the
    information costs a fraction of a full one) and replaces the intercept-only start when
    its penalised log-likelihood is higher (with an offset, whenever it can be evaluated: the
    intercept-only start would cost a pass of its own, and Newton's step-halving climbs from
    any start). ``in_memory``, Newton takes rounded steps when the problem allows
    (:func:`~service.stats.newton.rounding_safe` on the sample's information, else on the
    scan's ``X' W X``); they save computing, not reading.
    """
    names, method, intercept_index = opts.names, opts.method, opts.intercept_index
    max_iter, tol = opts.max_iter, opts.tol
    p = len(names)
    check_counts(summary, p)
    if summary.xtwx is not None and (method != "ridge" or opts.ridge_lambda == 0):
        check_rank(summary.xtwx, names, intercept_index)
    mask = np.ones(p)
    if intercept_index is not None:
        mask[intercept_index] = 0.0
    obj = make_objective(mask)
    rounded = in_memory and _rounding_safe(summary, start)
    warm = None
    if start is not None:
        steps = CHORD_MAX_STEPS if in_memory else 1
        warm = first_state(obj, start, summary.sum_weights, rounded=rounded, max_chord_steps=steps)
    if summary.xtwx is None:  # a scan without cross-products: the rank check on X' W X here
        if warm is None:
            raise _singular_start(names)
        if not warm.rounded:
            check_rank(warm.info, names, intercept_index)
        res = newton(obj, warm, np.ones(p, bool), max_iter=max_iter, tol=tol, rounded=rounded)
        if warm.rounded:  # on the final information, the first exact one
            check_rank(res.state.info, names, intercept_index)
        return res
    coef0 = np.zeros(p)
    if intercept_index is not None:
        coef0[intercept_index] = logit(summary.n_events / summary.sum_weights)
    if not summary.has_offset:
        state0 = obj.from_totals(coef0, _start_totals(summary, coef0, intercept_index))
    elif warm is None:
        state0 = obj.evaluate(coef0)
    else:
        state0 = warm
    if state0 is None:
        raise _singular_start(names)
    if warm is not None and warm.penalized_loglik > state0.penalized_loglik:
        state0 = warm
    return newton(obj, state0, np.ones(p, bool), max_iter=max_iter, tol=tol, rounded=rounded)


def _rounding_safe(summary: DataSummary, start: SampleStart | None) -> bool:
    """Whether Newton may take rounded steps (:func:`~service.stats.newton.rounding_safe`),
    judged on the sample's information or else on the scan's ``X' W X``."""
    if start is not None:
        return rounding_safe(start.info, start.sample_weight)
    return summary.xtwx is not None and rounding_safe(summary.xtwx, summary.sum_weights)


def _singular_start(names: tuple[str, ...]) -> RankDeficientError:
    return RankDeficientError(
        "the information matrix is singular at the start",
        field="X",
        value=list(names),
        remedy="remove redundant terms",
        details={"terms": list(names)},
    )


def _start_totals(s: DataSummary, coef: np.ndarray, intercept_index: int | None) -> Totals:
    """Log-likelihood, score and information at the constant-eta start, without a pass."""
    a = 0.0 if intercept_index is None else float(coef[intercept_index])
    mu = 1.0 / (1.0 + np.exp(-a))
    loglik = s.n_events * a - s.sum_weights * float(np.logaddexp(0.0, a))
    assert s.xtwx is not None  # a scan with cross-products
    return Totals(loglik, s.xtwy - mu * s.xtw, mu * (1.0 - mu) * s.xtwx, 0)
