"""Domain operation: fit a new version of a risk model and store it in one transaction.

    spec + options + columns -> learn_encoding -> size check -> design_matrix -> fit_logistic
    -> term_table (Wald, or profile likelihood) -> drop-term LR tests
    -> reference distributions + training ranges -> data fingerprint -> store

The reference distributions, training ranges and fingerprint depend on the data only, so they
are computed in a helper thread while the fit and its inference run (numpy's sorts, partitions
and hashlib release the GIL); their errors are raised after the fit's own. The fit's own
statistics (apparent AUC and Brier score: a sort of the fitted probabilities) are computed in
another while the drop-term LR tests run.

The size check (:func:`service.fit_size.check_fit_size`: terms against rows, the setting
``max_terms`` and the memory budget) runs on the encoding, before the design matrix exists.
Nothing is written unless every step succeeds and the version's answer (the body of its GET)
was built and validated from the flushed rows; the first version of a model becomes its
champion with the reason ``"first version"``. The steps live in their own modules:
request checks (:mod:`service.fit_checks`), the stored summaries (:mod:`service.fit_summaries`),
the data fingerprint (:mod:`service.fingerprint`) and the store (:mod:`service.version_store`);
their public names stay importable from here.
"""

from __future__ import annotations

import time
from concurrent.futures import ThreadPoolExecutor
from typing import Any

import numpy as np
from sqlalchemy.orm import Session

from models_store.orm import ModelVersion, RiskModel
from service.config import Settings
from service.data_io import TrainingData
from service.errors import FitError
from service.fingerprint import data_fingerprint, fingerprint_columns
from service.fit_checks import check_spec, in_request_terms, needed_columns, require_converged
from service.fit_size import check_fit_size
from service.fit_summaries import (
    drop_term_dicts,
    finite,
    fit_statistics_dict,
    fit_summary,
    reference_distributions_and_ranges,
    term_table_dict,
)
from service.schemas import VersionPublic, VersionSpec
from service.stats.blocks import array_blocks
from service.stats.columns import CodedLabels
from service.stats.design import design_matrix, learn_encoding
from service.stats.drop_groups import drop_groups
from service.stats.fit import LogisticFit, fit_logistic
from service.stats.inference import drop_term_tests, profile_intervals, term_table
from service.step_times import StepTimes
from service.version_store import FIRST_VERSION_REASON, store_version

__all__ = [
    "FIRST_VERSION_REASON",
    "check_spec",
    "data_fingerprint",
    "fingerprint_columns",
    "finite",
    "fit_statistics_dict",
    "fit_summary",
    "fit_version",
    "needed_columns",
    "reference_distributions_and_ranges",
    "require_converged",
    "store_version",
    "term_table_dict",
]


_DATA_SUMMARIES = ThreadPoolExecutor(max_workers=2, thread_name_prefix="riskfit-fit-data")


def _data_summaries(
    spec: VersionSpec, data: TrainingData
) -> tuple[dict[str, Any], dict[str, Any], str]:
    refs, ranges = reference_distributions_and_ranges(spec, data.columns, data.coded)
    options = spec.options
    return refs, ranges, data_fingerprint(data, spec.outcome, options.weights, options.offset)


def _fit_statistics(X: np.ndarray, fit: LogisticFit, data: TrainingData) -> dict[str, Any]:
    """The fit's statistics on its own data (fitted probabilities, apparent AUC and Brier)."""
    eta = X @ fit.coef + (data.offset if data.offset is not None else 0.0)
    p = 1.0 / (1.0 + np.exp(-eta))
    return fit_statistics_dict(fit, data.y, p, data.weights)


def fit_version(
    *,
    session: Session,
    model_name: str,
    spec: VersionSpec,
    data: TrainingData,
    confidence_level: float,
    settings: Settings,
    key_id: int | None = None,
    times: StepTimes | None = None,
) -> tuple[RiskModel, ModelVersion, VersionPublic]:
    """Fit, check and store a new version; returns ``(model, version, answer)``.

    Raises the engine's :class:`~service.errors.FitError` subclasses (separation, single
    class, rank deficiency, too few observations), :class:`NonConvergenceError` when Newton
    stopped early, :class:`SpecError`/:class:`DataError` for bad spec or data,
    :class:`LimitExceededError` / :class:`TooFewObservationsError` for a fit too large for
    ``settings`` (before the design matrix is built). The session is committed only after
    every step succeeded and the answer was validated; ``answer`` is that validated body.
    ``times``, if given, gets a lap per step (``encode``, ``fit``, ``inference``,
    ``summaries``, ``store``, ``answer``; :mod:`service.step_times`).
    """
    started = time.perf_counter()
    times = times if times is not None else StepTimes()
    check_spec(spec)
    options = spec.options
    features = [f.model_dump(exclude_none=True) for f in spec.features]
    columns: dict[str, np.ndarray | CodedLabels] = {**data.columns, **data.coded}  # codes if known
    encoding = learn_encoding(features, columns, interactions=spec.interactions)
    check_fit_size(
        settings,
        term_groups=encoding.term_groups,
        n_terms=len(encoding.term_names),
        n_obs=data.n_obs,
        design_rows=data.n_obs,
        interactions=spec.interactions,
    )
    X = design_matrix(encoding, columns).X
    times.lap("encode")
    data_summaries = _DATA_SUMMARIES.submit(_data_summaries, spec, data)
    try:
        fit = fit_logistic(
            X,
            data.y,
            weights=data.weights,
            offset=data.offset,
            term_names=encoding.term_names,
            method=options.method,
            ridge_lambda=options.ridge_lambda,
            max_iter=options.max_iter,
        )
    except FitError as exc:
        raise in_request_terms(exc, spec) from exc.__cause__
    require_converged(fit, options.method)
    times.lap("fit")
    blocks = array_blocks(X, data.y, data.weights, data.offset)
    if options.profile_intervals:
        table = profile_intervals(blocks, fit, confidence_level)
    else:
        table = term_table(fit, confidence_level)
    groups = drop_groups(encoding.term_groups, encoding.interactions)  # kinds: drop_groups
    fit_summary = _DATA_SUMMARIES.submit(_fit_statistics, X, fit, data)  # while the LR tests run
    drops = drop_term_tests(blocks, fit, groups)
    times.lap("inference")
    fit_stats = fit_summary.result()
    fit_stats["drop_term_tests"] = drop_term_dicts(drops)
    fit_stats["fit_seconds"] = time.perf_counter() - started
    refs, ranges, fingerprint = data_summaries.result()
    times.lap("summaries")
    stored = store_version(
        session=session,
        model_name=model_name,
        spec=spec,
        encoding=encoding,
        fit=fit,
        table=term_table_dict(table, fit),
        fit_stats=fit_stats,
        references=refs,
        ranges=ranges,
        fingerprint=fingerprint,
        confidence_level=confidence_level,
        key_id=key_id,
        times=times,
    )
    return stored
