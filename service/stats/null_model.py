"""The null model of the global likelihood-ratio test, for every method and engine.

Maximum likelihood and ridge: the intercept-only model with the same weights and offset
(offset-only without an intercept), by its closed form ``n_events log ybar + (sw - n_events)
log(1 - ybar)`` when there is no offset, else by Newton. Firth: the full model's penalised
log-likelihood ``l(b) + 1/2 log det I_full(b)`` maximised over the intercept with every other
coefficient 0 (:func:`firth_null`), the rule of the drop-term tests (Heinze & Schemper 2002,
*Statistics in Medicine* 21:2409-2419), so that the global test is the drop-term test of every
term at once.
"""

from __future__ import annotations

import numpy as np
from scipy.special import logit

from .blocks import BlockSource, sub_blocks
from .likelihood import DataSummary, loglik_pass
from .newton import Objective, newton

__all__ = ["FIRTH_GLOBAL_TEST_RULE", "firth_null", "global_test_rule", "null_logliks"]


def null_logliks(
    blocks: BlockSource, s: DataSummary, intercept_index: int | None, method: str
) -> tuple[float, float]:
    """(unpenalised MLE, penalised) log-likelihood of the intercept-only model."""
    if intercept_index is None:
        ll = loglik_pass(sub_blocks(blocks, []), np.zeros(0), want_info=False).loglik
    elif s.has_offset:
        null_blocks = sub_blocks(blocks, [intercept_index])
        obj = Objective(null_blocks, "mle", 0.0, np.zeros(1))
        start = np.array([logit(s.n_events / s.sum_weights)])
        st = obj.evaluate(start)
        ll = (
            newton(obj, st, np.ones(1, bool), max_iter=100, tol=1e-12).state.loglik
            if st
            else -np.inf
        )
    else:
        ybar = s.n_events / s.sum_weights
        ll = s.n_events * np.log(ybar) + (s.sum_weights - s.n_events) * np.log1p(-ybar)
    if method != "firth":
        return float(ll), float(ll)
    p = s.xtw.shape[0]
    return float(ll), firth_null(Objective(blocks, "firth", 0.0, np.ones(p)), s, intercept_index)


# The rule of Firth's global likelihood-ratio test, stored with the fit statistics.
FIRTH_GLOBAL_TEST_RULE = (
    "null model fitted under the full model's penalty: l(b) + 1/2 log det I_full(b) maximised "
    "over the intercept with every other coefficient 0 (Heinze & Schemper 2002), as in the "
    "drop-term tests"
)


def global_test_rule(method: str) -> str:
    """How the null model of the global likelihood-ratio test is fitted, for ``method``."""
    if method == "firth":
        return FIRTH_GLOBAL_TEST_RULE
    if method == "ridge":
        return (
            "null model: intercept-only maximum likelihood (the ridge penalty leaves the "
            "intercept free); statistic from the penalised log-likelihoods, chi2 approximate"
        )
    return "null model: intercept-only maximum likelihood, same weights and offset"


def firth_null(full: Objective, s: DataSummary, intercept_index: int | None) -> float:
    """Firth's null model under the full model's penalty (every engine).

    Maximises ``l(b) + 1/2 log det I(b)``, ``I`` the *full* model's information ``X'WX``, over
    the intercept alone with every other coefficient held at 0 (offset-only, with no free
    coefficient, without an intercept), as the drop-term tests restrict the full model
    (Heinze & Schemper 2002). ``full`` is the Firth objective on all columns.

    Without an offset the linear predictor is the same constant ``b0`` on every row, so
    ``I(b0) = v S`` with ``v = mu (1 - mu)``, ``mu = expit(b0)`` and ``S = X' diag(w) X`` the
    scan's cross-product: ``l*(b0) = E log mu + (sw - E) log(1 - mu) + p/2 log v + 1/2 log det S``
    (``E`` the weighted events), whose score ``E - sw mu + p/2 (1 - 2 mu)`` vanishes at
    ``mu = (E + p/2) / (sw + p)``: no pass is needed (:func:`_closed_form`). With an offset,
    Newton over the intercept on the full objective.
    """
    p = s.xtw.shape[0]
    if not s.has_offset and s.xtwx is not None:
        return _closed_form(s, intercept_index)
    coef = np.zeros(p)
    free = np.zeros(p, bool)
    if intercept_index is not None:
        coef[intercept_index] = logit(s.n_events / s.sum_weights)
        free[intercept_index] = True
    st = full.evaluate(coef)
    if st is None:
        return float("nan")
    res = newton(full, st, free, max_iter=100, tol=1e-12)
    return float(res.state.penalized_loglik) if res.converged else float("nan")


def _closed_form(s: DataSummary, intercept_index: int | None) -> float:
    """:func:`firth_null` without an offset, from the scan's sums (see there)."""
    assert s.xtwx is not None
    p = s.xtw.shape[0]
    sign, logdet_s = np.linalg.slogdet(s.xtwx)
    if sign <= 0:
        return float("nan")
    sw, events = s.sum_weights, s.n_events
    mu = 0.5 if intercept_index is None else (events + 0.5 * p) / (sw + p)
    ll = events * np.log(mu) + (sw - events) * np.log1p(-mu)
    return float(ll + 0.5 * (logdet_s + p * np.log(mu * (1.0 - mu))))
