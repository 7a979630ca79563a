"""Checks of the fitting options shared by every engine; each error names the option."""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass

import numpy as np

from service.errors import SpecError

__all__ = ["METHODS", "FitOptions", "fit_options"]

METHODS = ("mle", "firth", "ridge")


@dataclass(frozen=True)
class FitOptions:
    """A fit's checked options, as every engine passes them on (:func:`fit_options`)."""

    names: tuple[str, ...]  # term names, one per column of X
    method: str
    ridge_lambda: float
    intercept_index: int | None
    max_iter: int
    tol: float


def fit_options(
    n_terms: int,
    term_names: Sequence[str] | None,
    method: str,
    ridge_lambda: float,
    intercept_index: int | None,
    max_iter: int,
    tol: float,
) -> FitOptions:
    """The options, with the term names (given, or ``intercept``/``x<j>``), after checking
    every one of them."""
    if method not in METHODS:
        raise SpecError(
            f"unknown fitting method {method!r}",
            field="method",
            value=method,
            remedy='use "mle", "firth" or "ridge"',
        )
    if not np.isfinite(ridge_lambda) or ridge_lambda < 0:
        raise SpecError(
            "ridge_lambda must be a finite number >= 0",
            field="ridge_lambda",
            value=ridge_lambda,
            remedy="use e.g. 1.0",
        )
    if ridge_lambda > 0 and method != "ridge":
        raise SpecError(
            f'ridge_lambda is only used with method="ridge", not {method!r}',
            field="ridge_lambda",
            value=ridge_lambda,
            remedy='set method="ridge" or drop ridge_lambda',
        )
    if intercept_index is not None and not 0 <= intercept_index < n_terms:
        raise SpecError(
            f"intercept_index {intercept_index} is not a column of a {n_terms}-term design",
            field="intercept_index",
            value=intercept_index,
            remedy="give the column of ones, or None for a model without intercept",
        )
    if max_iter < 1 or not tol > 0:
        raise SpecError(
            "max_iter must be >= 1 and tol > 0",
            field="max_iter" if max_iter < 1 else "tol",
            value=max_iter if max_iter < 1 else tol,
            remedy="use the defaults (max_iter=100, tol=1e-10)",
        )
    if term_names is None:
        names = tuple("intercept" if j == intercept_index else f"x{j}" for j in range(n_terms))
        return FitOptions(names, method, float(ridge_lambda), intercept_index, max_iter, tol)
    names = tuple(str(t) for t in term_names)
    if len(names) != n_terms or len(set(names)) != n_terms:
        raise SpecError(
            f"term_names must be {n_terms} distinct names",
            field="term_names",
            value=list(names),
            remedy="give one distinct name per column of X",
        )
    return FitOptions(names, method, float(ridge_lambda), intercept_index, max_iter, tol)
