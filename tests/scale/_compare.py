"""The in-memory reference: the upload path's conversion, encoding and fit on a whole table."""

from __future__ import annotations

from typing import Any

import numpy as np
import pyarrow as pa

from service.data_io import TrainingData, table_columns, training_data
from service.stats.design import Encoding, design_matrix, learn_encoding
from service.stats.fit import LogisticFit, fit_logistic

TOL = 1e-10


def in_memory(
    table: pa.Table, features: list[dict[str, Any]], weights: str | None, offset: str | None
) -> TrainingData:
    kinds = {f["name"]: f["kind"] for f in features}
    names = [*kinds, "outcome", *(c for c in (weights, offset) if c)]
    return training_data(
        table_columns(table, names), kinds=kinds, outcome="outcome", weights=weights, offset=offset
    )


def fit_in_memory(
    data: TrainingData, features: list[dict[str, Any]], method: str = "mle"
) -> tuple[Encoding, np.ndarray, LogisticFit]:
    enc = learn_encoding(features, data.columns)
    X = design_matrix(enc, data.columns).X
    fit = fit_logistic(
        X,
        data.y,
        weights=data.weights,
        offset=data.offset,
        term_names=enc.term_names,
        method=method,  # type: ignore[arg-type]
    )
    return enc, X, fit


def assert_same_fit(a: LogisticFit, b: LogisticFit, tol: float = TOL) -> None:
    """Coefficients, covariance and log-likelihoods equal to ``tol`` (relative to scale 1)."""
    assert a.term_names == b.term_names
    np.testing.assert_allclose(b.coef, a.coef, rtol=tol, atol=tol)
    np.testing.assert_allclose(b.cov, a.cov, rtol=tol, atol=tol * float(np.abs(a.cov).max()))
    for name in ("loglik", "penalized_loglik", "null_loglik"):
        va, vb = getattr(a, name), getattr(b, name)
        assert abs(va - vb) <= tol * max(1.0, abs(va)), (name, va, vb)
    assert (a.n_obs, a.sum_weights, a.n_events) == (b.n_obs, b.sum_weights, b.n_events) or (
        a.n_obs == b.n_obs and abs(a.sum_weights - b.sum_weights) <= tol * a.sum_weights
    )
