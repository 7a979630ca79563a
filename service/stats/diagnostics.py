"""Detect data that admit no (finite, unique) maximum-likelihood logistic fit.

* single outcome class, and no more rows (with positive weight) than terms;
* rank deficiency: eigen-decomposition of the correlation matrix of the columns centred at
  their weighted means (with an intercept; the centring is algebraic, from ``X'WX``, so it
  needs no pass) or of the scaled cross-product ``D^-1/2 X'WX D^-1/2`` (D its diagonal,
  without one); eigenvectors of relative eigenvalues below ``RANK_TOL`` name the collinear
  terms. Centring makes the check invariant to shifting a column by a constant, as the
  model is (common practice in GLM software: collinearity is a property of the centred
  columns once an intercept is in the model);
* separation (Albert & Anderson 1984, *Biometrika* 71:1-10): the MLE does not
  exist iff some direction ``d != 0`` has ``s_i x_i'd >= 0`` for every row,
  ``s_i = 2 y_i - 1``, with at least one strict inequality. Following Konis
  (2007, DPhil thesis, Oxford, "Linear programming algorithms for detecting
  separated data in binary logistic regression models"), this is the linear
  programme ``max sum_i s_i x_i'd  s.t.  s_i x_i'd >= 0, -1 <= d_j <= 1``,
  solved with ``scipy.optimize.linprog`` (HiGHS); a positive optimum is
  separation and the non-zero entries of ``d`` name the terms whose estimates
  diverge. The programme always runs for small data (``LP_ALWAYS_CELLS`` = rows x
  terms); up to ``LP_MAX_CELLS`` it runs when Newton's method shows the
  divergence signature (not converged, fitted probabilities numerically 0 or 1,
  or a standard error large on the scale of its term, ``se_j * sd_j > SUSPECT_SE``).
  Beyond that the signature alone decides: ``se_j * sd_j > DIVERGED_SE``
  (under separation the SE of a diverging estimate grows like exp(|b_j| / 2)).
"""

from __future__ import annotations

from collections.abc import Sequence

import numpy as np
from scipy.optimize import linprog

from service.errors import (
    RankDeficientError,
    SeparationError,
    SingleClassError,
    TooFewObservationsError,
)

from .blocks import BlockSource
from .likelihood import DataSummary

__all__ = [
    "check_counts",
    "check_rank",
    "check_separation",
    "collinear_dependencies",
    "collinear_terms",
    "separating_direction",
]

RANK_TOL = 1e-10
LP_ALWAYS_CELLS = 100_000
LP_MAX_CELLS = 2_000_000
SUSPECT_SE = 1.0
DIVERGED_SE = 5.0
FIRTH_REMEDY = 'refit with method="firth" (bias-reduced, finite under separation) or "ridge"'


def check_counts(summary: DataSummary, p: int) -> None:
    """Raise for a single outcome class or for no more positive-weight rows than terms."""
    if summary.sum_weights <= 0 or summary.n_events <= 0 or summary.n_events >= summary.sum_weights:
        only = "0 (no event)" if summary.n_events <= 0 else "1 (event)"
        raise SingleClassError(
            f"every outcome is {only}; a logistic model needs both classes",
            field="y",
            value=f"{summary.n_events:g} events in {summary.sum_weights:g} weighted rows",
            remedy="fit on data that contain both events and non-events",
            details={"n_obs": summary.n_obs, "n_events": summary.n_events},
        )
    if summary.n_positive <= p:
        raise TooFewObservationsError(
            f"{summary.n_positive} rows with positive weight for {p} terms; "
            "need more rows than terms",
            field="X",
            value=f"{summary.n_positive} rows, {p} terms",
            remedy="add rows or remove terms (fewer features, levels or spline knots)",
            details={"n_obs": summary.n_positive, "n_terms": p},
        )


def _centred(xtwx: np.ndarray, intercept_index: int) -> tuple[np.ndarray, np.ndarray]:
    """``(C, m)``: the weighted cross-product of the columns other than the intercept, centred
    at their weighted means ``m``, from ``X'WX`` alone (its intercept row is ``X'w``):

        C = S - s s' / sw,    S = X_o' W X_o,  s = X_o' w,  sw = 1' w,  m = s / sw.
    """
    other = np.setdiff1d(np.arange(xtwx.shape[0]), [intercept_index])
    sw = float(xtwx[intercept_index, intercept_index])
    s = xtwx[intercept_index, other]
    C = xtwx[np.ix_(other, other)] - np.outer(s, s) / sw
    return C, s / sw


def _small_eigenvectors(S: np.ndarray) -> list[tuple[int, np.ndarray]]:
    """A basis of the (numerical) null space of a correlation-scaled cross-product, one
    dependency per vector: ``(pivot, v)`` pairs.

    The eigenvectors with relative eigenvalue below :data:`RANK_TOL` span the null space, but
    with two or more dependencies each of them mixes all of them (an eigenbasis is any
    rotation of the space). Gauss-Jordan elimination with pivoting on those k vectors (k, m)
    gives the reduced row echelon basis: vector i has 1 at its own pivot column and 0 at every
    other pivot, so it names one dependency, and removing the k pivot columns leaves full rank
    (a null vector without its pivots' entries is 0).
    """
    vals, vecs = np.linalg.eigh(S)
    small = np.flatnonzero(vals < RANK_TOL * max(float(vals[-1]), 1.0))
    N = vecs[:, small].T.copy()  # (k, m)
    free = np.ones(N.shape[1], dtype=bool)
    out: list[tuple[int, np.ndarray]] = []
    for i in range(N.shape[0]):
        j = int(np.argmax(np.where(free, np.abs(N[i]), -1.0)))
        N[i] /= N[i, j]
        for r in range(N.shape[0]):
            if r != i:
                N[r] -= N[r, j] * N[i]
        free[j] = False
        out.append((j, N[i]))
    return out


def _named(v: np.ndarray) -> np.ndarray:
    """Indices of the entries of a dependency that matter, in column order."""
    a = np.abs(v)
    return np.flatnonzero(a > 1e-3 * a.max())


def collinear_terms(
    xtwx: np.ndarray, term_names: Sequence[str], intercept_index: int | None = None
) -> list[list[str]]:
    """Groups of terms in exact (or numerically exact) linear dependence, each in column
    order; [] if full rank (:func:`collinear_dependencies` without the terms to remove)."""
    return [g for g, _ in collinear_dependencies(xtwx, term_names, intercept_index)]


def collinear_dependencies(
    xtwx: np.ndarray, term_names: Sequence[str], intercept_index: int | None = None
) -> list[tuple[list[str], str]]:
    """``(group, remove)`` per linear dependency: the group's terms in column order, and one
    term of it whose removal resolves this dependency; removing every ``remove`` together
    leaves full rank (:func:`_small_eigenvectors`: one pivot per dependency).

    With an intercept (``intercept_index``) collinearity is judged on the columns centred at
    their weighted means and scaled to unit variance (:func:`_centred`), so shifting a column
    by a constant (a year, an id-like offset) changes nothing, as for the fit itself: a
    constant column is named with the intercept, and a group whose combination is a non-zero
    constant (a full set of dummies) includes the intercept. Without one, the cross-product is
    only scaled by its diagonal. ``X'WX`` may carry any positive weights (also Newton's
    ``w mu (1 - mu)``): the centring uses the same weights.
    """
    p = xtwx.shape[0]
    if intercept_index is None or p < 2 or not xtwx[intercept_index, intercept_index] > 0:
        return _uncentred_groups(xtwx, term_names)
    other = np.setdiff1d(np.arange(p), [intercept_index])
    C, mean = _centred(xtwx, intercept_index)
    # a centred variance below the rounding error of the uncentred sum is zero
    floor = 64.0 * np.finfo(float).eps * np.abs(np.diag(xtwx)[other])
    var = np.diag(C)
    rms = np.sqrt(np.diag(xtwx)[other] / float(xtwx[intercept_index, intercept_index]))
    const = var <= floor
    icpt = term_names[intercept_index]
    groups: list[tuple[list[str], str]] = [
        ([icpt, term_names[int(other[j])]], term_names[int(other[j])])
        for j in np.flatnonzero(const)
    ]
    live = np.flatnonzero(~const)
    if live.size:
        d = np.sqrt(var[live])
        for pivot, v in _small_eigenvectors(C[np.ix_(live, live)] / np.outer(d, d)):
            big = _named(v)
            coef = v / d  # the combination in the columns' own units
            level = float(coef[big] @ mean[live[big]])  # the combination's constant value
            spread = float(np.abs(coef[big]) @ rms[live[big]])  # its terms' typical size
            named = [term_names[int(other[live[j]])] for j in big]
            with_icpt = ([icpt] if abs(level) > 1e-6 * spread else []) + named
            groups.append((with_icpt, term_names[int(other[live[pivot]])]))
    return groups


def _uncentred_groups(xtwx: np.ndarray, term_names: Sequence[str]) -> list[tuple[list[str], str]]:
    """Collinear groups of ``D^-1/2 X'WX D^-1/2`` (no intercept to centre with)."""
    d = np.sqrt(np.clip(np.diag(xtwx), 0.0, None))
    groups = [([term_names[int(j)]], term_names[int(j)]) for j in np.flatnonzero(d == 0)]
    live = np.flatnonzero(d > 0)
    if live.size:
        S = xtwx[np.ix_(live, live)] / np.outer(d[live], d[live])
        for pivot, v in _small_eigenvectors(S):
            named = [term_names[int(live[j])] for j in _named(v)]
            groups.append((named, term_names[int(live[pivot])]))
    return groups


def check_rank(
    xtwx: np.ndarray, term_names: Sequence[str], intercept_index: int | None = None
) -> None:
    """Raise :class:`RankDeficientError` naming the collinear terms (:func:`collinear_terms`)."""
    deps = collinear_dependencies(xtwx, term_names, intercept_index)
    groups = [g for g, _ in deps]
    remove = [r for _, r in deps]
    if groups:
        terms = sorted({t for g in groups for t in g}, key=list(term_names).index)
        zero = any(len(g) == 1 for g in groups)
        const = intercept_index is not None and any(
            len(g) == 2 and g[0] == term_names[intercept_index] for g in groups
        )
        raise RankDeficientError(
            "the design matrix is rank deficient: "
            + "; ".join(" ~ ".join(g) for g in groups)
            + (" (constant zero column)" if zero else "")
            + (" (a constant column duplicates the intercept)" if const else ""),
            field="X",
            value=terms,
            remedy=f"remove {', '.join(map(repr, remove))} (one term of each collinear group, "
            "listed in details.remove; removing them all leaves full rank), or drop a redundant "
            "categorical level or an interaction whose cells are empty",
            details={"terms": terms, "groups": groups, "remove": remove},
        )


def _collect(blocks: BlockSource) -> tuple[np.ndarray, np.ndarray]:
    xs, ss = [], []
    for b in blocks():
        keep = slice(None) if b.weights is None else b.weights > 0
        xs.append(b.X[keep])
        ss.append(2.0 * b.y[keep] - 1.0)
    return np.concatenate(xs), np.concatenate(ss)


def separating_direction(X: np.ndarray, s: np.ndarray) -> np.ndarray | None:
    """Direction ``d`` (in X's units) with ``s_i x_i'd >= 0`` for all rows, or ``None``."""
    scale = np.abs(X).max(axis=0)
    scale[scale == 0] = 1.0
    A = (X / scale) * s[:, None]
    res = linprog(
        -A.sum(axis=0),
        A_ub=-A,
        b_ub=np.zeros(A.shape[0]),
        bounds=[(-1.0, 1.0)] * A.shape[1],
        method="highs",
    )
    if res.status != 0 or -res.fun <= 1e-9 * (1.0 + float(np.abs(A).sum())):
        return None
    d = np.where(np.abs(res.x) > 1e-7, res.x, 0.0)
    margins = A @ d
    if margins.min() < -1e-8 or margins.max() <= 1e-8:
        return None
    return d / scale  # type: ignore[no-any-return]


def _raise_separation(terms: list[str], how: str) -> None:
    raise SeparationError(
        "complete or quasi-complete separation: the maximum-likelihood estimate does not "
        f"exist; estimates diverge for {', '.join(terms)} ({how})",
        field="X",
        value=terms,
        remedy=FIRTH_REMEDY,
        details={"terms": terms, "detected_by": how},
    )


def check_separation(
    blocks: BlockSource,
    summary: DataSummary,
    coef: np.ndarray,
    std_error: np.ndarray,
    term_names: Sequence[str],
    intercept_index: int | None,
    *,
    suspicious: bool,
) -> None:
    """Raise :class:`SeparationError` if the data are separated (see module docstring).

    ``suspicious``: Newton did not converge or produced fitted probabilities of 0 or 1.
    """
    p = coef.shape[0]
    mean = summary.xtw / summary.sum_weights
    var = np.clip(summary.sum_wx2 / summary.sum_weights - mean**2, 0.0, None)
    sd = np.where(var > 0, np.sqrt(var), 1.0)
    scaled_se = np.where(np.isfinite(std_error), std_error * sd, np.inf)
    if intercept_index is not None:
        scaled_se[intercept_index] = 0.0
    cells = summary.n_positive * p
    suspicious = suspicious or bool((scaled_se > SUSPECT_SE).any())
    if cells <= LP_ALWAYS_CELLS or (suspicious and cells <= LP_MAX_CELLS):
        X, s = _collect(blocks)
        d = separating_direction(X, s)
        if d is not None:
            nonzero = [int(j) for j in np.flatnonzero(d)]
            nz = [j for j in nonzero if j != intercept_index] or nonzero
            _raise_separation([term_names[j] for j in nz], "linear programme")
        return
    diverged = [term_names[j] for j in range(p) if scaled_se[j] > DIVERGED_SE]
    if cells > LP_MAX_CELLS and diverged:
        _raise_separation(diverged, "diverging estimates in Newton iterations")
