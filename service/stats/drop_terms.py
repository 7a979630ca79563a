"""Drop-term likelihood-ratio tests: the model refitted with a group of columns set to 0.

A drop-term refit (columns ``d`` set to 0, the others ``f`` free) starts where the full
fit's quadratic approximation puts the restricted maximum,
``b_f = b_hat_f + I_ff^{-1} I_fd b_hat_d`` with ``I = cov^{-1}``, and stops when the Newton
decrement ``g_f' I_ff^{-1} g_f`` (twice the predicted remaining gain in log-likelihood,
Boyd & Vandenberghe 2004, sec. 9.5.1) is below :data:`DECREMENT_TOL`; the restricted
log-likelihood is then ``l + decrement / 2`` (the quadratic model's maximum);
``2 (l_full - l_restricted)`` is referred to chi2 with the group's size as df. The steps
are first chord steps (:func:`_chord_refits`: the full fit's information held, so no pass
computes one, and all groups share each pass; three to five passes in all), and Newton steps
for a group whose chord converges slowly. The statistic agrees with a fully converged refit to about
1e-9 of itself, or 1e-8 absolute (tests/stats/test_drop_term_refits.py).
In a Newton refit the last pass skips the information (about half the cost of a pass) when
Newton's quadratic convergence says the coming step ends it: with ``r = lambda /
lambda_prev^2`` seen on the full step just taken (``lambda^2`` the decrement), the
predicted decrement after the step, ``(r lambda^2)^2``, is below a tenth of
:data:`DECREMENT_TOL`, and ``r lambda`` (the relative change of the information along the
step, of the order of the third derivative times the step) is at most :data:`INFO_DRIFT`.
The decrement at the new point is then taken with the information at the step's start;
its error, about ``r lambda`` times a decrement below 1e-6, stays below 1e-9. If that
decrement is not below the tolerance, the usual full pass and step follow (mle and ridge;
Firth's penalty needs the information at every point). Firth and ridge fits use penalised
log-likelihoods (the full-model penalty, Heinze & Schemper 2002): a Firth reduced model
maximises ``l(b) + 1/2 log det I_full(b)`` over the free coefficients, ``I_full`` the full
model's information, not the reduced model's own penalty. Firth's global test follows the
same rule (:func:`service.stats.fit.firth_null`: the null model is the full model with only
the intercept free).

Which columns a test drops, and what kind of test that makes (a main effect that also appears
in an interaction: its own columns only, or with every interaction containing it, the test
respecting marginality): :mod:`service.stats.drop_groups`.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass

import numpy as np
from scipy.linalg import LinAlgError, cho_factor, cho_solve
from scipy.stats import chi2

from service.errors import SpecError

from .blocks import BlockSource
from .drop_groups import DropGroup
from .fit import LogisticFit, centred_view, constrained_fit
from .likelihood import Totals, loglik_pass
from .newton import Objective, State
from .score_pass import score_pass

__all__ = [
    "CHORD_MIN_CONTRACTION",
    "CHORD_REL_TOL",
    "DECREMENT_TOL",
    "INFO_DRIFT",
    "LRTest",
    "drop_term_tests",
    "lr_test",
]

# Newton decrement at which a drop-term refit stops (log-likelihood units): near the maximum
# the remaining error of ``l + decrement / 2`` is of order decrement^1.5 (~1e-9 here).
DECREMENT_TOL = 1e-6
_DROP_MAX_STEPS = 50
# Largest predicted relative change of the information over the last step of a drop-term
# refit for which the final pass may skip the information (module docstring).
INFO_DRIFT = 1e-3
# A chord refit (held information) gives way to Newton unless each pass shrinks the decrement
# at least this many times (a slower rate costs more cheap passes than Newton's full ones).
CHORD_MIN_CONTRACTION = 8.0
# A chord refit also stops once its decrement is below this fraction of the LR statistic.
CHORD_REL_TOL = 5e-9


@dataclass(frozen=True)
class LRTest:
    name: str
    statistic: float
    df: int
    p_value: float
    kind: str = ""  # drop-term tests: service.stats.drop_groups (e.g. "main effect")
    dropped: tuple[str, ...] = ()  # drop-term tests: the term groups set to 0


def lr_test(name: str, stat: float, df: int) -> LRTest:
    stat = max(stat, 0.0)
    return LRTest(name, stat, df, float(chi2.sf(stat, df)) if df > 0 else float("nan"))


def drop_term_tests(
    blocks: BlockSource, fit: LogisticFit, groups: Mapping[str, Sequence[int] | DropGroup]
) -> tuple[LRTest, ...]:
    """LR test per group: all its columns set to 0 together.

    ``groups`` maps a name to column indices (e.g. ``Encoding.term_groups``; the test's
    ``kind`` is then ``"columns"``) or to a :class:`~service.stats.drop_groups.DropGroup`
    (:func:`~service.stats.drop_groups.drop_groups`: main effects, interactions and the
    marginality-respecting tests, each with its kind and the term groups dropped).
    """
    p = len(fit.term_names)
    checked: list[tuple[str, list[int]]] = []
    about: dict[str, tuple[str, tuple[str, ...]]] = {}
    for name, group in groups.items():
        if isinstance(group, DropGroup):
            cols: Sequence[int] = group.columns
            about[name] = (group.kind, group.dropped)
        else:
            cols = group
            about[name] = ("columns", (name,))
        idx = sorted({int(c) for c in cols})
        if not idx or idx[0] < 0 or idx[-1] >= p or fit.intercept_index in idx:
            raise SpecError(
                f"term group {name!r} must list non-intercept columns of the model",
                field=f"groups.{name}",
                value=list(cols),
                remedy=f"use column indices in 0..{p - 1} other than the intercept",
            )
        checked.append((name, idx))
    blocks, fit = centred_view(blocks, fit)  # no group holds the intercept (checked above)
    info = _full_information(fit)
    by_chord: dict[str, float] = {}
    if info is not None and fit.method != "firth":
        by_chord = _chord_refits(blocks, fit, info, checked)
    out = []
    for name, idx in checked:
        restricted = by_chord.get(name)
        if restricted is None:
            restricted = _restricted_loglik(blocks, fit, info, idx)
        t = lr_test(name, 2.0 * (fit.penalized_loglik - restricted), len(idx))
        kind, dropped = about[name]
        out.append(LRTest(t.name, t.statistic, t.df, t.p_value, kind, dropped))
    return tuple(out)


def _full_information(fit: LogisticFit) -> np.ndarray | None:
    """The (penalised) information at the estimate, ``cov^{-1}``; None if cov is unusable."""
    if not np.all(np.isfinite(fit.cov)):
        return None
    try:
        return np.linalg.inv(fit.cov)
    except np.linalg.LinAlgError:
        return None


def _warm_start(fit: LogisticFit, info: np.ndarray | None, fixed: np.ndarray) -> np.ndarray:
    """Restricted maximum of the full fit's quadratic approximation (module docstring)."""
    coef = fit.coef.astype(np.float64, copy=True)
    free = np.setdiff1d(np.arange(coef.size), fixed)
    if info is not None and free.size:
        try:
            shift = np.linalg.solve(
                info[np.ix_(free, free)], info[np.ix_(free, fixed)] @ coef[fixed]
            )
            coef[free] += shift
        except np.linalg.LinAlgError:
            pass
    coef[fixed] = 0.0
    return coef


def _restricted_loglik(
    blocks: BlockSource, fit: LogisticFit, info: np.ndarray | None, fixed: list[int]
) -> float:
    """Maximum (penalised) log-likelihood with ``coef[fixed] = 0`` (Newton, decrement stop)."""
    start = _warm_start(fit, info, np.asarray(fixed, dtype=np.intp))
    obj = _objective(blocks, fit)
    free = np.setdiff1d(np.arange(start.size), fixed)
    state: State | None = obj.evaluate(start)
    last: float | None = None  # decrement before the last step, if that step was a full one
    for _ in range(_DROP_MAX_STEPS):
        if state is None or free.size == 0:
            break
        try:
            chol = cho_factor(state.info[np.ix_(free, free)], lower=True, check_finite=False)
        except LinAlgError:
            break
        step = cho_solve(chol, state.score[free], check_finite=False)
        decrement = float(state.score[free] @ step)
        if 0.0 <= decrement <= DECREMENT_TOL:
            return state.penalized_loglik + 0.5 * decrement
        if last is not None and fit.method != "firth" and _last_step(last, decrement):
            final = _final_without_information(obj, state, free, step, chol)
            if final is not None:
                return final
        state, full = _halving_step(obj, state, free, step)
        last = decrement if full else None
    if state is not None and free.size == 0:
        return state.penalized_loglik
    fixed_at = dict.fromkeys(fixed, 0.0)  # fall back to the general constrained refit
    return constrained_fit(blocks, fit, fixed_at, start=start).penalized_loglik


def _objective(blocks: BlockSource, fit: LogisticFit) -> Objective:
    mask = np.ones(fit.coef.size)
    if fit.intercept_index is not None:
        mask[fit.intercept_index] = 0.0
    return Objective(blocks, fit.method, fit.ridge_lambda, mask)


@dataclass
class _Chord:
    """One group's chord refit in progress."""

    name: str
    free: np.ndarray
    chol: tuple[np.ndarray, bool]  # Cholesky factor of the held I_ff
    coef: np.ndarray
    before: float = np.inf  # decrement at the previous point
    floor: float = -np.inf  # the log-likelihood may not fall below this


def _chord_refits(
    blocks: BlockSource, fit: LogisticFit, info: np.ndarray, groups: list[tuple[str, list[int]]]
) -> dict[str, float]:
    """Restricted maxima by chord steps, all groups in the same passes: {group: loglik}.

    Each step is ``I_ff(b_hat)^{-1} g_f`` with ``g`` the score at the current point and the full
    fit's information held, the simplified Newton (chord) method (Kelley, *Iterative Methods for
    Linear and Nonlinear Equations*, 1995, sec. 5.4), so no pass computes an information, and
    one :func:`~service.stats.score_pass.score_pass` serves every group still running. It
    converges linearly, at a rate set by how much the information moves between the full and
    the restricted maximum (decrements fall 100- to 1000-fold per pass on the benchmark's
    1,000,000 rows). A group stops when the decrement (taken with the held information) is below
    :data:`DECREMENT_TOL` or :data:`CHORD_REL_TOL` times the LR statistic so far, giving
    ``l + decrement / 2``. Its error is at most the decrement times the relative change of the
    information over the step, which the contraction guard keeps below about 0.35, so the
    statistic is right to about 2e-9 of itself (a large statistic needs no 1e-6 absolute
    accuracy; the p-value does not move). A group
    whose step lowers the log-likelihood, or whose decrement shrinks less than
    :data:`CHORD_MIN_CONTRACTION`-fold, is left out (the caller runs Newton for it).
    """
    obj = _objective(blocks, fit)
    p = fit.coef.size
    active: list[_Chord] = []
    for name, fixed in groups:
        free = np.setdiff1d(np.arange(p), fixed)
        try:
            chol = cho_factor(info[np.ix_(free, free)], lower=True, check_finite=False)
        except LinAlgError:
            continue
        start = _warm_start(fit, info, np.asarray(fixed, dtype=np.intp))
        active.append(_Chord(name, free, chol, start))
    done: dict[str, float] = {}
    no_info = np.zeros((p, p))
    for _ in range(_DROP_MAX_STEPS):
        if not active:
            break
        ll, scores = score_pass(blocks, np.column_stack([c.coef for c in active]))
        running = []
        for j, c in enumerate(active):
            totals = Totals(float(ll[j]), scores[:, j].copy(), no_info, 0)
            state = obj.from_totals(c.coef, totals)
            if state is None or state.penalized_loglik < c.floor:
                continue
            g = state.score[c.free]
            step = cho_solve(c.chol, g, check_finite=False)
            decrement = float(g @ step)
            statistic = 2.0 * (fit.penalized_loglik - state.penalized_loglik)
            if 0.0 <= decrement <= max(DECREMENT_TOL, CHORD_REL_TOL * statistic):
                done[c.name] = state.penalized_loglik + 0.5 * decrement
            elif 0.0 <= decrement <= c.before / CHORD_MIN_CONTRACTION:
                c.before = decrement
                c.floor = state.penalized_loglik - 1e-12 * abs(state.penalized_loglik)
                c.coef = c.coef.copy()
                c.coef[c.free] += step
                running.append(c)
        active = running
    return done


def _last_step(before: float, now: float) -> bool:
    """Whether the coming Newton step should end the refit (module docstring).

    Quadratic convergence: ``lambda_next ~ r lambda^2`` with ``r = lambda / lambda_prev^2``
    seen on the full step just taken. True when ten times the predicted decrement after the
    step is below :data:`DECREMENT_TOL` and the step is short enough (``r lambda <=``
    :data:`INFO_DRIFT`) for the information at its start to stand for the one at its end.
    """
    lam = np.sqrt(now)
    r = lam / before
    return bool(10.0 * (r * now) ** 2 <= DECREMENT_TOL and r * lam <= INFO_DRIFT)


def _final_without_information(
    obj: Objective, state: State, free: np.ndarray, step: np.ndarray, chol: tuple[np.ndarray, bool]
) -> float | None:
    """``l + decrement / 2`` after the full step, from a pass without the information.

    The decrement at the new point uses the information at ``state`` (its Cholesky factor
    ``chol``); None when the step does not increase the log-likelihood or the decrement is not
    yet below :data:`DECREMENT_TOL` (the caller then takes the usual step).
    """
    coef = state.coef.copy()
    coef[free] += step
    new = obj.from_totals(coef, loglik_pass(obj.blocks, coef, want_info=False))
    if new is None or new.penalized_loglik < state.penalized_loglik:
        return None
    g = new.score[free]
    decrement = float(g @ cho_solve(chol, g, check_finite=False))
    if 0.0 <= decrement <= DECREMENT_TOL:
        return new.penalized_loglik + 0.5 * decrement
    return None


def _halving_step(
    obj: Objective, state: State, free: np.ndarray, step: np.ndarray
) -> tuple[State | None, bool]:
    """The Newton step, halved until the (penalised) log-likelihood does not decrease.

    Returns the new state (None if 40 halvings did not help) and whether the full step was taken.
    """
    floor = state.penalized_loglik - 1e-12 * abs(state.penalized_loglik)
    for halvings in range(40):
        coef = state.coef.copy()
        coef[free] += step
        new = obj.evaluate(coef)
        if new is not None and new.penalized_loglik >= floor:
            return new, halvings == 0
        step = step / 2.0
    return None, False
