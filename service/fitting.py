"""Domain operation: fit a new version of a risk model and store it in one transaction.

    spec + options + columns -> learn_encoding -> design_matrix -> fit_logistic
    -> term_table (Wald, or profile likelihood) -> drop-term LR tests
    -> reference distributions + training ranges -> data fingerprint -> store

Nothing is written unless every step succeeds; the first version of a model becomes its
champion with the reason ``"first version"``.

Data fingerprint (SHA-256, hex) of the canonical training data
----------------------------------------------------------------
The hash covers exactly what the fit used, independent of how it was sent (JSON columns,
JSON rows, CSV or Parquet give the same fingerprint for the same values):

* the header ``b"riskfit-training-data/1\\n"`` and the row count as uint64 little-endian;
* then, for each used column in sorted name order (features, the outcome, weights, offset):
  the UTF-8 name, a NUL byte, a one-byte type tag (``f`` float, ``s`` text), then the data:
  ``f`` columns as float64 little-endian (C order, ``-0.0`` normalised to ``0.0``; the outcome
  is stored as 0.0/1.0), ``s`` columns as each value's UTF-8 bytes preceded by its length as
  uint32 little-endian.

Row order is part of the data (two files with the same rows in another order differ).
"""

from __future__ import annotations

import hashlib
import math
import struct
import time
from collections.abc import Callable, Iterable, Mapping
from typing import Any

import numpy as np
from sqlalchemy.orm import Session

from models_store.champions import set_champion
from models_store.models import create_model, get_model
from models_store.orm import ModelVersion, RiskModel
from models_store.versions import add_version
from service.data_io import NUMERIC_KINDS, TrainingData
from service.errors import FitError, NonConvergenceError, SingleClassError, SpecError
from service.schemas import VersionSpec
from service.stats.blocks import array_blocks
from service.stats.columns import CodedLabels
from service.stats.design import Encoding, design_matrix, learn_encoding
from service.stats.fit import LogisticFit, fit_logistic
from service.stats.inference import drop_term_tests, global_lr_test, profile_intervals, term_table
from service.stats.metrics import auc, brier
from service.stats.psi import categorical_reference, numeric_reference

__all__ = [
    "FIRST_VERSION_REASON",
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

FIRST_VERSION_REASON = "first version"
RESERVED_NAMES = frozenset({"key"})  # the record field of a client's own score id


def finite(value: float) -> float | None:
    """A float for JSON, with NaN/inf as ``None`` (the store refuses non-finite JSON)."""
    v = float(value)
    return v if math.isfinite(v) else None


def needed_columns(spec: VersionSpec) -> list[str]:
    """Every column the fit reads: features, the outcome, then weights and offset if named."""
    names = [f.name for f in spec.features] + [spec.outcome]
    names += [c for c in (spec.options.weights, spec.options.offset) if c]
    return names


def check_spec(spec: VersionSpec) -> None:
    """Spec consistency the schema cannot express (duplicates, reserved and unknown names)."""
    seen: set[str] = set()
    for i, f in enumerate(spec.features):
        if f.name in RESERVED_NAMES:
            raise SpecError(
                f"{f.name!r} is reserved for the client's record key",
                field=f"features[{i}].name",
                value=f.name,
                remedy="rename the column, e.g. to segment_key",
            )
        if f.name in seen or f.name == spec.outcome:
            raise SpecError(
                f"feature {f.name!r} is named twice (or is also the outcome)",
                field=f"features[{i}].name",
                value=f.name,
                remedy="give every feature one entry and keep the outcome separate",
            )
        seen.add(f.name)
    for j, pair in enumerate(spec.interactions):
        for name in pair:
            if name not in seen:
                raise SpecError(
                    f"interaction names {name!r}, which is not a feature",
                    field=f"interactions[{j}]",
                    value=list(pair),
                    remedy="list both features of an interaction under features",
                )
    if spec.options.method != "ridge" and spec.options.ridge_lambda:
        raise SpecError(
            "ridge_lambda is only used with method='ridge'",
            field="options.ridge_lambda",
            value=spec.options.ridge_lambda,
            remedy="set options.method to 'ridge', or drop ridge_lambda",
        )


def data_fingerprint(
    data: TrainingData, outcome: str, weights: str | None, offset: str | None
) -> str:
    """SHA-256 of the canonical training data (see the module docstring)."""
    cols: dict[str, np.ndarray | CodedLabels] = {**data.columns, **data.coded}
    cols[outcome] = data.y
    if weights and data.weights is not None:
        cols[weights] = data.weights
    if offset and data.offset is not None:
        cols[offset] = data.offset
    return fingerprint_columns(data.n_obs, {k: _whole(v) for k, v in cols.items()})


def _whole(values: np.ndarray | CodedLabels) -> Callable[[], list[np.ndarray | CodedLabels]]:
    return lambda: [values]


def fingerprint_columns(
    n_obs: int, columns: Mapping[str, Callable[[], Iterable[np.ndarray | CodedLabels]]]
) -> str:
    """The fingerprint from each column's consecutive parts (one call per column, in order).

    ``columns[name]()`` yields the column's values part by part (a whole array, or the chunks
    of a streamed file); the bytes hashed are those of :func:`data_fingerprint`.
    """
    h = hashlib.sha256(b"riskfit-training-data/1\n")
    h.update(struct.pack("<Q", n_obs))
    for name in sorted(columns):
        h.update(name.encode() + b"\x00")
        tagged = False
        for values in columns[name]():
            is_float = not isinstance(values, CodedLabels) and values.dtype.kind == "f"
            if not tagged:
                h.update(b"f" if is_float else b"s")
                tagged = True
            if is_float:
                h.update((np.ascontiguousarray(values, dtype="<f8") + 0.0).tobytes())
            else:
                h.update(_text_bytes(values))
    return h.hexdigest()


def _text_bytes(values: np.ndarray | CodedLabels) -> bytes:
    """Each value's UTF-8 bytes after its length (uint32 LE), encoded once per distinct value."""
    if not isinstance(values, CodedLabels):
        values = CodedLabels.from_strings([str(v) for v in values.tolist()])
    pieces = [struct.pack("<I", len(b)) + b for b in (lv.encode() for lv in values.levels)]
    return b"".join(map(pieces.__getitem__, values.codes.tolist()))


def reference_distributions_and_ranges(
    spec: VersionSpec,
    columns: Mapping[str, np.ndarray],
    coded: Mapping[str, CodedLabels] | None = None,
) -> tuple[dict[str, Any], dict[str, Any]]:
    """Reference distributions (drift baselines) and training ranges per feature."""
    refs: dict[str, Any] = {}
    ranges: dict[str, Any] = {}
    for f in spec.features:
        values = columns[f.name]
        if f.kind in NUMERIC_KINDS:
            refs[f.name] = numeric_reference(values, field=f"data.columns.{f.name}").to_dict()
            ranges[f.name] = {
                "kind": f.kind,
                "min": float(values.min()),
                "max": float(values.max()),
                "n_obs": int(values.size),
            }
        else:
            c = (coded or {}).get(f.name)
            c = c if c is not None else CodedLabels.from_strings(list(map(str, values.tolist())))
            refs[f.name] = categorical_reference(c).to_dict()
            counts = c.counts()
            ranges[f.name] = {
                "kind": f.kind,
                "levels": {c.levels[j]: int(counts[j]) for j in np.argsort(c.levels)},
                "n_obs": int(values.size),
            }
    return refs, ranges


def fit_statistics_dict(
    fit: LogisticFit, y: np.ndarray, p: np.ndarray, weights: np.ndarray | None
) -> dict[str, Any]:
    stats = fit_summary(fit)
    stats["apparent_auc"] = finite(auc(y, p, weights))
    stats["apparent_brier"] = finite(brier(y, p, weights))
    return stats


def fit_summary(fit: LogisticFit) -> dict[str, Any]:
    """Fit statistics that need no pass over the data (all but apparent AUC and Brier)."""
    g = global_lr_test(fit)
    stats: dict[str, Any] = {
        "n_obs": fit.n_obs,
        "n_events": float(fit.n_events),
        "sum_weights": float(fit.sum_weights),
        "method": fit.method,
        "ridge_lambda": float(fit.ridge_lambda),
        "loglik": finite(fit.loglik),
        "penalized_loglik": finite(fit.penalized_loglik),
        "null_loglik": finite(fit.null_loglik),
        "deviance": finite(fit.deviance),
        "null_deviance": finite(fit.null_deviance),
        "aic": finite(fit.aic),
        "bic": finite(fit.bic),
        "mcfadden_r2": finite(fit.mcfadden_r2),
        "converged": fit.converged,
        "iterations": fit.iterations,
        "stop_reason": fit.stop_reason,
        "global_lr_test": {
            "name": g.name,
            "statistic": finite(g.statistic),
            "df": g.df,
            "p_value": finite(g.p_value),
        },
    }
    return stats


def term_table_dict(table: Any, fit: LogisticFit) -> dict[str, Any]:
    fields = (
        "estimate",
        "std_error",
        "z",
        "p_value",
        "ci_lower",
        "ci_upper",
        "odds_ratio",
        "odds_ratio_ci_lower",
        "odds_ratio_ci_upper",
    )
    return {
        "confidence_level": float(table.confidence_level),
        "ci_method": table.ci_method,
        "n_obs": fit.n_obs,
        "n_events": float(fit.n_events),
        "terms": [
            {"name": r.name, **{k: finite(getattr(r, k)) for k in fields}} for r in table.rows
        ],
    }


def require_converged(fit: LogisticFit, method: str) -> None:
    """:class:`NonConvergenceError` when Newton stopped early (nothing is stored then)."""
    if not fit.converged:
        raise NonConvergenceError(
            f"the fit did not converge after {fit.iterations} iterations: {fit.stop_reason}",
            field="options.method",
            value=method,
            remedy="try options.method='firth' (or 'ridge' with a small ridge_lambda), fewer "
            "levels or terms, or a larger options.max_iter",
            details={"iterations": fit.iterations, "stop_reason": fit.stop_reason},
        )


def _in_request_terms(exc: FitError, spec: VersionSpec) -> FitError:
    """Name the request's fields instead of the engine's arrays ``y`` and ``X``."""
    if isinstance(exc, SingleClassError):
        exc.field = f"data.{spec.outcome}"
    elif exc.field == "X" or (exc.field or "").startswith("X["):
        exc.field = "features"
    return exc


def fit_version(
    *,
    session: Session,
    model_name: str,
    spec: VersionSpec,
    data: TrainingData,
    confidence_level: float,
    key_id: int | None = None,
) -> tuple[RiskModel, ModelVersion, bool]:
    """Fit, check and store a new version; returns ``(model, version, is_champion)``.

    Raises the engine's :class:`~service.errors.FitError` subclasses (separation, single
    class, rank deficiency, too few observations), :class:`NonConvergenceError` when Newton
    stopped early, :class:`SpecError`/:class:`DataError` for bad spec or data. The session is
    committed only after every step succeeded.
    """
    started = time.perf_counter()
    check_spec(spec)
    options = spec.options
    features = [f.model_dump(exclude_none=True) for f in spec.features]
    columns: dict[str, np.ndarray | CodedLabels] = {**data.columns, **data.coded}  # codes if known
    encoding = learn_encoding(features, columns, interactions=spec.interactions)
    X = design_matrix(encoding, columns).X
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
        raise _in_request_terms(exc, spec) from exc.__cause__
    require_converged(fit, options.method)
    blocks = array_blocks(X, data.y, data.weights, data.offset)
    if options.profile_intervals:
        table = profile_intervals(blocks, fit, confidence_level)
    else:
        table = term_table(fit, confidence_level)
    groups = {k: v for k, v in encoding.term_groups.items() if k != "intercept"}
    drops = drop_term_tests(blocks, fit, groups)
    eta = X @ fit.coef + (data.offset if data.offset is not None else 0.0)
    p = 1.0 / (1.0 + np.exp(-eta))
    fit_stats = fit_statistics_dict(fit, data.y, p, data.weights)
    fit_stats["drop_term_tests"] = [
        {"name": d.name, "statistic": finite(d.statistic), "df": d.df, "p_value": finite(d.p_value)}
        for d in drops
    ]
    fit_stats["fit_seconds"] = time.perf_counter() - started
    refs, ranges = reference_distributions_and_ranges(spec, data.columns, data.coded)
    fingerprint = data_fingerprint(data, spec.outcome, options.weights, options.offset)

    return store_version(
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
    )


def store_version(
    *,
    session: Session,
    model_name: str,
    spec: VersionSpec,
    encoding: Encoding,
    fit: LogisticFit,
    table: dict[str, Any],
    fit_stats: dict[str, Any],
    references: dict[str, Any],
    ranges: dict[str, Any],
    fingerprint: str,
    confidence_level: float,
    key_id: int | None,
) -> tuple[RiskModel, ModelVersion, bool]:
    """Store a checked fit as the model's next version in one commit (first one: champion)."""
    options = spec.options
    model = get_model(session=session, name=model_name)
    if model is None:
        model = create_model(session=session, name=model_name, description=spec.description or "")
        session.flush()
    version = add_version(
        session=session,
        model=model,
        # Only the spec itself: a JSON fit request also carries its data, which is not kept here.
        spec=spec.model_dump(
            mode="json", include=set(VersionSpec.model_fields) - {"note", "description"}
        ),
        encoding=encoding.to_dict(),
        term_names=list(fit.term_names),
        coef=[float(c) for c in fit.coef],
        cov=np.asarray(fit.cov, dtype=float).tolist(),
        fit_stats=fit_stats,
        term_table=table,
        method=fit.method,
        options={
            **options.model_dump(mode="json"),
            "confidence_level": confidence_level,
            "warnings": list(fit.warnings),
        },
        training_ranges=ranges,
        reference_distributions=references,
        data_fingerprint=fingerprint,
        n_obs=fit.n_obs,
        n_events=float(fit.n_events),
        parent_number=None,
        origin="fit",
        origin_details={},
        note=spec.note or "",
        created_by_key_id=key_id,
    )
    is_champion = version.number == 1
    if is_champion:
        set_champion(
            session=session, model=model, number=1, reason=FIRST_VERSION_REASON, key_id=key_id
        )
    session.commit()
    return model, version, is_champion
