"""Domain operation: fit and store a version from a server-side file, streamed or on Dask.

    allowed path -> streamed encoding (levels, knots, ranges, references; 2-4 passes)
    -> size check (terms, rows, memory; before any design block is built)
    -> Newton passes (local block source, or the Dask engine) -> Wald table
    -> drop-term LR tests (constrained refits over the same passes)
    -> apparent Brier (and AUC up to AUC_MAX_ROWS rows) -> fingerprint (one projected pass
    per column, same bytes as an upload) -> store_version (commits only with a validated answer)

The stored version is the one an upload of the same rows gives (same encoding, references,
ranges, fingerprint; coefficients and covariance equal to 1e-10).
"""

from __future__ import annotations

import time
from collections.abc import Iterator
from typing import Any

import numpy as np
from sqlalchemy.orm import Session

from models_store.orm import ModelVersion, RiskModel
from service.config import Settings
from service.errors import PermissionDeniedError, SpecError
from service.fit_size import check_fit_size
from service.fit_summaries import drop_term_dicts
from service.fitting import (
    check_spec,
    fingerprint_columns,
    finite,
    fit_summary,
    require_converged,
    store_version,
    term_table_dict,
)
from service.schemas import VersionPublic, VersionSpec
from service.stats.blocks import BlockSource
from service.stats.drop_groups import drop_groups
from service.stats.fit import LogisticFit, fit_logistic_blocks
from service.stats.inference import drop_term_tests, profile_intervals, term_table
from service.stats.metrics import auc

from .blocks import file_blocks
from .encoding import StreamedEncoding, learn_streamed
from .file_limits import ReadLimits
from .paths import data_files
from .tables import BATCH_ROWS, TableSpec, check_files, chunks

__all__ = ["AUC_MAX_ROWS", "fit_version_from_path"]

AUC_MAX_ROWS = 2_000_000  # the exact c-statistic needs every prediction in memory


def _scheduler(settings: Settings, asked: str | None) -> str:
    allowed = settings.dask_schedulers
    if not allowed or (asked is not None and asked not in allowed):
        raise PermissionDeniedError(
            f"the server may not use the Dask scheduler {asked or '(default)'}",
            field="data.scheduler",
            value=asked,
            remedy="an operator must list it in the setting dask_schedulers "
            f"(env RISKFIT_DASK_SCHEDULERS, a JSON list); allowed: {allowed}",
            details={"setting": "dask_schedulers", "allowed": allowed},
        )
    return asked or allowed[0]


def _apparent(blocks: BlockSource, fit: LogisticFit) -> dict[str, Any]:
    """Apparent Brier score (exact, streamed) and c-statistic (exact up to AUC_MAX_ROWS)."""
    keep = fit.n_obs <= AUC_MAX_ROWS
    sq = 0.0
    ys, ps, ws = [], [], []
    for b in blocks():
        eta = b.X @ fit.coef + (0.0 if b.offset is None else b.offset)
        p = 1.0 / (1.0 + np.exp(-eta))
        w = np.ones_like(p) if b.weights is None else b.weights
        sq += float((w * (p - b.y) ** 2).sum())
        if keep:
            ys.append(b.y)
            ps.append(p)
            ws.append(w)
    out: dict[str, Any] = {"apparent_brier": finite(sq / fit.sum_weights), "apparent_auc": None}
    if keep:
        out["apparent_auc"] = finite(
            auc(np.concatenate(ys), np.concatenate(ps), np.concatenate(ws))
        )
    return out


def _fingerprint(spec: TableSpec, se: StreamedEncoding, batch_rows: int) -> str:
    def column(name: str) -> Any:
        def parts() -> Iterator[np.ndarray]:
            if name in spec.kinds:
                one = TableSpec(
                    spec.path, {name: spec.kinds[name]}, spec.outcome, checked=spec.checked
                )
                return (c.columns[name] for c in chunks(one, batch_rows))
            w = name if name == spec.weights else None
            o = name if name == spec.offset else None
            one = TableSpec(spec.path, {}, spec.outcome, w, o, spec.checked)
            attr = "y" if name == spec.outcome else ("weights" if w else "offset")
            return (getattr(c, attr) for c in chunks(one, batch_rows))

        return parts

    return fingerprint_columns(se.n_obs, {name: column(name) for name in spec.columns})


def _fit(
    engine: str, settings: Settings, scheduler: str | None, blocks: BlockSource, **kw: Any
) -> tuple[LogisticFit, Any]:
    if engine == "local":
        return fit_logistic_blocks(blocks, **kw), None
    from service.distributed import DaskEngine, connect, file_partitions, fit_logistic_dask

    client = connect(_scheduler(settings, scheduler))
    try:
        enc, spec = kw.pop("encoding"), kw.pop("table")
        parts = file_partitions(
            spec.data.files, enc.to_dict(), spec.outcome, weights=spec.weights, offset=spec.offset
        )
        de = DaskEngine(client, parts)
        return fit_logistic_dask(de, **kw), client
    except BaseException:
        client.close()
        raise


def fit_version_from_path(
    *,
    session: Session,
    settings: Settings,
    model_name: str,
    spec: VersionSpec,
    path: str,
    confidence_level: float,
    engine: str = "local",
    scheduler: str | None = None,
    key_id: int | None = None,
    batch_rows: int = BATCH_ROWS,
) -> tuple[RiskModel, ModelVersion, VersionPublic]:
    """Fit ``spec`` on the file(s) at ``path`` and store the version (see module docstring).

    Returns ``(model, version, answer)``, the answer validated before the commit.
    """
    started = time.perf_counter()
    check_spec(spec)
    options = spec.options
    if engine == "dask" and options.profile_intervals:
        raise SpecError(
            "profile-likelihood intervals are not offered with the dask engine",
            field="options.profile_intervals",
            value=True,
            remedy="use Wald intervals (profile_intervals: false) or engine 'local'",
        )
    if engine == "dask":
        _scheduler(settings, scheduler)
    checked = data_files(path, settings.fit_data_dirs)  # every file the reader will open
    resolved = str(checked.path)
    features = [f.model_dump(exclude_none=True) for f in spec.features]
    kinds = {f.name: f.kind for f in spec.features}
    table = TableSpec(resolved, kinds, spec.outcome, options.weights, options.offset, checked)
    check_files(table, ReadLimits.from_settings(settings))
    se = learn_streamed(
        features,
        lambda: chunks(table, batch_rows),
        spec.interactions,
        max_levels=settings.max_levels,
    )
    enc = se.encoding
    check_fit_size(
        settings,
        term_groups=enc.term_groups,
        n_terms=len(enc.term_names),
        n_obs=se.n_obs,
        # Dask: the workers hold the design; locally one batch at a time (two lanes)
        design_rows=0 if engine == "dask" else min(se.n_obs, 2 * batch_rows),
        interactions=spec.interactions,
    )
    blocks = file_blocks(
        resolved, enc, spec.outcome, options.weights, options.offset, batch_rows, checked
    )
    kw: dict[str, Any] = {
        "n_terms": len(enc.term_names),
        "term_names": enc.term_names,
        "method": options.method,
        "ridge_lambda": options.ridge_lambda,
        "max_iter": options.max_iter,
    }
    if engine == "dask":
        kw.update(encoding=enc, table=table)
    fit, client = _fit(engine, settings, scheduler, blocks, **kw)
    try:
        require_converged(fit, options.method)
        if options.profile_intervals:
            terms = profile_intervals(blocks, fit, confidence_level)
        else:
            terms = term_table(fit, confidence_level)
        groups = drop_groups(enc.term_groups, enc.interactions)  # kinds as the upload path
        drops = drop_term_tests(blocks, fit, groups)
    finally:
        if client is not None:
            client.close()
    stats = fit_summary(fit) | _apparent(blocks, fit)
    stats["drop_term_tests"] = drop_term_dicts(drops)
    stats["data_source"] = {"path": checked.shown, "engine": engine, "encoding_passes": se.passes}
    stats["fit_seconds"] = time.perf_counter() - started
    return store_version(
        session=session,
        model_name=model_name,
        spec=spec,
        encoding=enc,
        fit=fit,
        table=term_table_dict(terms, fit),
        fit_stats=stats,
        references=se.references,
        ranges=se.ranges,
        fingerprint=_fingerprint(table, se, batch_rows),
        confidence_level=confidence_level,
        key_id=key_id,
    )
