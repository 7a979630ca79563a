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

Penalties, with ``m`` the mask of penalised coefficients (every term but the
intercept):

* ``ridge``: ``l(b) - lambda/2 * sum_j m_j b_j^2``; information ``I + lambda diag(m)``
  (Hoerl & Kennard 1970; le Cessie & van Houwelingen 1992 for the logistic model).
* ``firth``: ``l(b) + 1/2 log det I(b)`` (see :mod:`service.stats.firth`).

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

__all__ = ["NewtonResult", "Objective", "State", "newton"]


@dataclass(frozen=True)
class State:
    """Everything known at one ``coef`` (score is the penalised gradient)."""

    coef: np.ndarray
    loglik: float
    penalized_loglik: float
    score: np.ndarray
    info: np.ndarray  # penalised information (p, p)
    n_extreme: int


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
        return State(coef, t.loglik, pen, score, info, t.n_extreme)

    def evaluate(self, coef: np.ndarray) -> State | None:
        return self.from_totals(coef, loglik_pass(self.blocks, coef))

    def evaluate_without_information(self, coef: np.ndarray) -> State | None:
        """Log-likelihood and score only (``info`` zeros; not for Firth: its score needs it)."""
        return self.from_totals(coef, loglik_pass(self.blocks, coef, want_info=False))


def newton(
    obj: Objective,
    state: State,
    free: np.ndarray,
    *,
    max_iter: int,
    tol: float,
) -> NewtonResult:
    """Maximise from ``state``; only coefficients with ``free[j]`` move."""
    idx = np.flatnonzero(free)
    max_step = np.inf
    for iteration in range(max_iter + 1):
        dev = -2.0 * state.penalized_loglik
        if idx.size == 0:
            return NewtonResult(state, True, iteration, "no free coefficients", 0.0)
        try:
            chol = cho_factor(state.info[np.ix_(idx, idx)], lower=True, check_finite=False)
        except LinAlgError:
            return NewtonResult(
                state, False, iteration, "information matrix not positive definite", max_step
            )
        step = cho_solve(chol, state.score[idx], check_finite=False)
        se = np.sqrt(np.abs(np.diag(cho_solve(chol, np.eye(idx.size), check_finite=False))))
        max_step = float(np.max(np.abs(step) / (np.abs(state.coef[idx]) + se)))
        # Newton decrement: the deviance decrease the quadratic model predicts for this step.
        decrement = float(state.score[idx] @ step)
        if decrement <= tol * (abs(dev) + 0.1) and max_step <= 100.0 * tol:
            return NewtonResult(state, True, iteration, "converged", max_step)
        if iteration == max_iter:
            break
        new = None
        for _halving in range(40):
            coef = state.coef.copy()
            coef[idx] += step
            new = obj.evaluate(coef)
            if new is not None and new.penalized_loglik >= state.penalized_loglik - 1e-12 * abs(
                state.penalized_loglik
            ):
                break
            new = None
            step = step / 2.0
        if new is None:
            return NewtonResult(
                state,
                False,
                iteration,
                "step-halving could not increase the log-likelihood",
                max_step,
            )
        state = new
    return NewtonResult(
        state,
        False,
        max_iter,
        f"iteration cap {max_iter} reached (largest scaled step {max_step:.2e})",
        max_step,
    )
