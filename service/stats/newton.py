"""Newton-Raphson with step-halving on a (penalised) binomial log-likelihood.

Named steps: evaluate (one fused pass: log-likelihood, score, information),
inner solve (Cholesky of the information restricted to the free coefficients),
line search (halve the step while the penalised log-likelihood decreases),
convergence check (the Newton decrement ``g' I^-1 g``, the deviance decrease the
quadratic model predicts for the coming step, at most ``tol`` times the deviance, *and* the
largest step at most ``100 tol`` in units of |coef| + standard error; both are known before
the step is taken, so the check costs no pass; Boyd & Vandenberghe, *Convex Optimization*,
2004, sec. 9.5.1), finish (the information at the final iterate
is the one the covariance comes from, so no extra pass is needed).

Rounded steps (``rounded=True``): while the steps are large, the passes sum the information
in single precision (:func:`~service.stats.likelihood.loglik_pass`), about half the time of
a pass with many terms. The log-likelihood and score stay in double precision, so the
maximum is the same; an information with a relative error ``eps`` only turns the quadratic
convergence into ``e_{k+1} <= C e_k^2 + eps kappa e_k`` (``kappa`` its condition number), which
for ``eps ~ 1e-7`` and the well-conditioned problems it is used on (:func:`rounding_safe`) is
no slower. Once the coming step is at most :data:`ROUNDED_STEP_LIMIT` (so that the iterate
after the next is expected to pass the convergence test, the next one giving the step that
reaches it) the passes are in double precision again, and the state returned always carries a
double-precision information (a converged rounded state is evaluated once more).

The rounding's error in a step is not squared away by the next one, so a state reached by a
step from a rounded information counts as converged only with a largest scaled step of
``tol`` rather than ``100 tol``: the maximum is then found as precisely as without rounding,
and fits of the same data along different paths (other blocks, another engine) agree as
closely. A rounded state whose information is not positive definite, or whose step cannot be
made to climb, is evaluated again in double precision and Newton goes on without rounding.

Penalties, with ``m`` the mask of penalised coefficients (every term but the
intercept):

* ``ridge``: ``l(b) - lambda/2 * sum_j m_j b_j^2``; information ``I + lambda diag(m)``
  (Hoerl & Kennard 1970; le Cessie & van Houwelingen 1992 for the logistic model).
* ``firth``: ``l(b) + 1/2 log det I(b)`` (see :mod:`service.stats.firth`). Its steps use the
  Fisher information ``I(b)``, not the Hessian of the penalty (which needs the whole hat
  matrix), as Heinze & Schemper (2002) do. Where the penalty's curvature is as large as the
  log-likelihood's, the step is too long: for a categorical level seen once, with an event,
  the one row's ``l* = 3/2 log mu + 1/2 log(1 - mu)`` has curvature ``-2 mu (1 - mu)`` against
  the information's ``mu (1 - mu)``, so the full step lands as far beyond the maximum as it
  started before it, and the iterates oscillate for ever with an unchanged ``l*``. Each Firth
  step is therefore checked with the score at its end (which the pass computes anyway): a
  step that passed the maximum along its line is shortened to the secant point where the
  slope along the line vanishes (:func:`_secant_correction`, one more pass when it happens),
  which makes the iteration a contraction (a line search along the scoring direction).
  Where levels of different sizes (or separation and a large raw-unit slope) make the
  mismatch differ between directions, a line search alone converges slowly, so Firth's steps
  solve ``(I + C) d = U*`` with ``C`` a secant (SR1) estimate of the penalty's curvature
  learned from the score changes (:func:`_curvature_update`; dropped whenever ``I + C`` is not
  positive definite). Convergence is judged as for every method (the decrement and the
  largest step in units of ``|coef| + se``, both invariant to the units of a column); the
  covariance stays ``I^-1`` at the estimate (Heinze & Schemper 2002).

Coefficients outside the ``free`` mask stay at their starting values, which is how
constrained refits (profile likelihood, likelihood-ratio tests) are computed with the
full-model penalty, as Heinze & Schemper (2002) prescribe for Firth's method.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from scipy.linalg import LinAlgError, cho_factor, cho_solve, cholesky

from .blocks import BlockSource
from .firth import half_logdet, hat_score_adjustment
from .likelihood import Totals, loglik_pass

__all__ = ["ROUNDED_STEP_LIMIT", "NewtonResult", "Objective", "State", "newton", "rounding_safe"]

# Largest scaled step after which the next pass is in double precision. Newton's error squares
# (e_{k+1} ~ C e_k^2, C measured 0.1-1 on 200,000 x 101 and on its sample): after a step of
# 1e-2 the error is ~1e-4 and the one after ~1e-8, the convergence test; so the last two
# states, the one whose step reaches the maximum and the one that shows it, are exact.
ROUNDED_STEP_LIMIT = 1e-2
ROUNDED_MAX_CONDITION = 1e5  # kappa (of the correlation-scaled information) up to which
ROUNDED_RANGE = (1e-30, 1e30)  # and diagonal entries / total weight in which rounding is safe
# Firth: a step whose end slope along it is below -SECANT_TRIGGER times its start slope
# overshot the maximum on its line and is shortened to the secant point (module docstring).
SECANT_TRIGGER = 0.1
# Firth: the penalty's curvature is learned (SR1) only from steps this small (scaled as in the
# convergence test); larger ones mostly measure the log-likelihood's third derivative.
CURVATURE_STEP_LIMIT = 0.1


@dataclass(frozen=True)
class State:
    """Everything known at one ``coef`` (score is the penalised gradient)."""

    coef: np.ndarray
    loglik: float
    penalized_loglik: float
    score: np.ndarray
    info: np.ndarray  # penalised information (p, p)
    n_extreme: int
    rounded: bool = False  # info summed in single precision (steps only, see module docstring)


@dataclass(frozen=True)
class NewtonResult:
    state: State
    converged: bool
    iterations: int
    stop_reason: str
    max_step: float  # largest |step| / (|coef| + se) at the final iterate


class Objective:
    """The penalised log-likelihood of one method over one block source."""

    def __init__(
        self, blocks: BlockSource, method: str, ridge_lambda: float, penalty_mask: np.ndarray
    ) -> None:
        self.blocks = blocks
        self.method = method
        self.lam = ridge_lambda
        self.mask = penalty_mask.astype(np.float64)

    def from_totals(self, coef: np.ndarray, t: Totals) -> State | None:
        """Apply the penalty to raw sums; ``None`` when the information is not positive definite."""
        if not np.isfinite(t.loglik):
            return None
        info, score, pen = t.info, t.score, t.loglik
        if self.method == "ridge" and self.lam > 0:
            pen -= 0.5 * self.lam * float(np.sum(self.mask * coef**2))
            score = score - self.lam * self.mask * coef
            info = info + np.diag(self.lam * self.mask)
        if self.method == "firth":
            try:
                chol = cholesky(info, lower=True, check_finite=False)
            except LinAlgError:
                return None
            pen += half_logdet(chol)
            adj, _ = hat_score_adjustment(self.blocks, coef, chol)
            score = score + adj
        return State(coef, t.loglik, pen, score, info, t.n_extreme, t.rounded)

    def evaluate(self, coef: np.ndarray, *, rounded: bool = False) -> State | None:
        """A full pass at ``coef``; ``rounded``: the information in single precision (module
        docstring; not for Firth, whose penalty needs the exact one)."""
        rounded = rounded and self.method != "firth"
        return self.from_totals(coef, loglik_pass(self.blocks, coef, rounded=rounded))

    def evaluate_without_information(self, coef: np.ndarray) -> State | None:
        """Log-likelihood and score only (``info`` zeros; not for Firth: its score needs it)."""
        return self.from_totals(coef, loglik_pass(self.blocks, coef, want_info=False))


def rounding_safe(info: np.ndarray, sum_weights: float) -> bool:
    """Whether Newton may take rounded steps on a problem with (roughly) this information:
    diagonal entries per unit weight within :data:`ROUNDED_RANGE` (no overflow or loss of
    precision in single precision) and a condition number of the correlation-scaled matrix of
    at most :data:`ROUNDED_MAX_CONDITION`."""
    d = np.diag(info)
    lo, hi = ROUNDED_RANGE
    per_weight = d / max(sum_weights, 1e-300)
    if not (np.all(np.isfinite(d)) and np.all(per_weight > lo) and np.all(per_weight < hi)):
        return False
    s = np.sqrt(d)
    vals = np.linalg.eigvalsh(info / np.outer(s, s))
    return bool(vals[0] > 0 and vals[-1] <= ROUNDED_MAX_CONDITION * vals[0])


def _exact(obj: Objective, state: State) -> State:
    """``state`` with its information in double precision (one more pass if it was rounded)."""
    if not state.rounded:
        return state
    again = obj.evaluate(state.coef)
    return state if again is None else again


def _factor(info: np.ndarray, corr: np.ndarray) -> tuple[np.ndarray, bool]:
    """Cholesky factor of ``info + corr``, or of ``info`` alone when that is not positive
    definite (raises :class:`LinAlgError` if neither is)."""
    if np.any(corr):
        try:
            return cho_factor(info + corr, lower=True, check_finite=False)  # type: ignore[no-any-return]
        except LinAlgError:
            corr[:] = 0.0
    return cho_factor(info, lower=True, check_finite=False)  # type: ignore[no-any-return]


def _curvature_update(corr: np.ndarray, old: State, new: State, idx: np.ndarray) -> np.ndarray:
    """Firth: symmetric rank-one secant update of ``C``, the estimate of the penalty's part of
    the negative Hessian, so that the steps solve ``(I + C) d = U*`` (a structured
    quasi-Newton method: the exact part ``I`` recomputed at every point, the rest learned
    from the score changes; Dennis, Gay & Welsch 1981, *ACM TOMS* 7:348-368, for the same
    split in least squares). The secant condition ``(I_bar + C_new) s = y`` with step ``s``,
    ``y = U*_old - U*_new`` and ``I_bar`` the mean of the informations at the step's ends
    (the trapezoid rule for the log-likelihood's part, so that its change along the step is
    not taken for the penalty's) gives ``r = y - I_bar s - C s`` and
    ``C_new = C + r r' / (r' s)``, skipped when ``|r' s|`` is tiny (Nocedal & Wright,
    *Numerical Optimization*, 2006, sec. 6.2)."""
    s = new.coef[idx] - old.coef[idx]
    y = old.score[idx] - new.score[idx]
    info = 0.5 * (old.info[np.ix_(idx, idx)] + new.info[np.ix_(idx, idx)])  # trapezoid rule
    r = y - info @ s - corr @ s
    rs = float(r @ s)
    if not np.all(np.isfinite(r)) or abs(rs) <= 1e-8 * float(np.linalg.norm(r) * np.linalg.norm(s)):
        return corr
    return corr + np.outer(r, r) / rs


def _secant_correction(
    obj: Objective, state: State, new: State, idx: np.ndarray, step: np.ndarray
) -> State:
    """Firth: shorten a step that overshot the maximum along its direction (module docstring).

    With ``s0 = g(b)' d`` and ``s1 = g(b + d)' d`` the penalised log-likelihood's slopes along
    the step ``d`` at its two ends, ``s1 < 0`` means the step passed the maximum on its line;
    the secant (regula falsi) point ``t = s0 / (s0 - s1)`` is where the slope, linear along
    the line, is zero. It replaces ``b + d`` when its penalised log-likelihood is no lower.
    """
    s0 = float(state.score[idx] @ step)
    s1 = float(new.score[idx] @ step)
    if not (s0 > 0.0 and s1 < -SECANT_TRIGGER * s0):
        return new
    t = s0 / (s0 - s1)
    coef = state.coef.copy()
    coef[idx] += t * step
    short = obj.evaluate(coef)
    if short is None or short.penalized_loglik < new.penalized_loglik:
        return new
    return short


def newton(
    obj: Objective,
    state: State,
    free: np.ndarray,
    *,
    max_iter: int,
    tol: float,
    rounded: bool = False,
) -> NewtonResult:
    """Maximise from ``state``; only coefficients with ``free[j]`` move.

    ``rounded``: take rounded steps while they are large (module docstring); ``state`` may
    itself be rounded. The state returned is never rounded.
    """
    idx = np.flatnonzero(free)
    max_step = np.inf
    step_tol = 100.0 * tol
    corr = np.zeros((idx.size, idx.size))  # Firth: secant estimate of the penalty's curvature
    for iteration in range(max_iter + 1):
        if idx.size == 0:
            return NewtonResult(_exact(obj, state), True, iteration, "no free coefficients", 0.0)
        dev = -2.0 * state.penalized_loglik
        try:
            chol = _factor(state.info[np.ix_(idx, idx)], corr)
        except LinAlgError:
            if state.rounded:  # rounding may have cost positive definiteness
                state, rounded = _exact(obj, state), False
                continue
            return NewtonResult(
                state, False, iteration, "information matrix not positive definite", max_step
            )
        step = cho_solve(chol, state.score[idx], check_finite=False)
        se = np.sqrt(np.abs(np.diag(cho_solve(chol, np.eye(idx.size), check_finite=False))))
        max_step = float(np.max(np.abs(step) / (np.abs(state.coef[idx]) + se)))
        # Newton decrement: the deviance decrease the quadratic model predicts for this step.
        decrement = float(state.score[idx] @ step)
        if decrement <= tol * (abs(dev) + 0.1) and max_step <= step_tol:
            return NewtonResult(_exact(obj, state), True, iteration, "converged", max_step)
        if iteration == max_iter:
            break
        use_rounded = rounded and max_step > ROUNDED_STEP_LIMIT
        new = None
        for _halving in range(40):
            coef = state.coef.copy()
            coef[idx] += step
            new = obj.evaluate(coef, rounded=use_rounded)
            if new is not None and new.penalized_loglik >= state.penalized_loglik - 1e-12 * abs(
                state.penalized_loglik
            ):
                break
            new = None
            step = step / 2.0
        if new is None:
            if state.rounded:  # the step came from a rounded information: retry without
                state, rounded = _exact(obj, state), False
                continue
            return NewtonResult(
                state,
                False,
                iteration,
                "step-halving could not increase the log-likelihood",
                max_step,
            )
        if obj.method == "firth":
            new = _secant_correction(obj, state, new, idx, step)
            if max_step <= CURVATURE_STEP_LIMIT:
                corr = _curvature_update(corr, state, new, idx)
        # A rounded information's error in the step just taken is not squared away: a state
        # reached by such a step must show a step 100 times smaller to count as converged.
        step_tol = tol if state.rounded else 100.0 * tol
        state = new
    return NewtonResult(
        _exact(obj, state),
        False,
        max_iter,
        f"iteration cap {max_iter} reached (largest scaled step {max_step:.2e})",
        max_step,
    )
