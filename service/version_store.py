"""Store a checked fit as a model's next version, together with its answer, in one commit.

The model row is created on its first fit; the first version becomes the champion with the
reason :data:`FIRST_VERSION_REASON`. The rows are flushed, the answer the GET route gives is
built and validated from them (:func:`service.version_answer.version_answer`), and only then
is the transaction committed: a version is never stored without an answer that can be built
from it. Any failure rolls the transaction back, so nothing is written.

Every float stored is finite (:func:`json_finite` turns NaN/inf into ``None`` in the
summaries; the coefficients and covariance must be finite, else :class:`FitError`).
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from sqlalchemy.orm import Session

from models_store.champions import set_champion
from models_store.models import create_model, get_model
from models_store.orm import ModelVersion, RiskModel
from models_store.versions import add_version
from service.errors import FitError
from service.fit_summaries import odds_ratio_warnings
from service.schemas import VersionPublic, VersionSpec
from service.stats.design import Encoding
from service.stats.fit import LogisticFit
from service.step_times import StepTimes
from service.version_answer import version_answer

__all__ = [
    "FIRST_VERSION_REASON",
    "commit_with_answer",
    "json_finite",
    "require_finite_fit",
    "store_version",
]

FIRST_VERSION_REASON = "first version"


def json_finite(value: Any) -> Any:
    """``value`` with every non-finite float (at any depth) replaced by ``None``."""
    if isinstance(value, float):
        return value if math.isfinite(value) else None
    if isinstance(value, dict):
        return {k: json_finite(v) for k, v in value.items()}
    if isinstance(value, list | tuple):
        return [json_finite(v) for v in value]
    if isinstance(value, np.floating):
        return json_finite(float(value))
    return value


def require_finite_fit(coef: np.ndarray, cov: np.ndarray, term_names: Any) -> None:
    """Refuse (:class:`FitError`, 422) a fit whose coefficients or covariance are not finite.

    A converged fit has finite coefficients; a covariance with inf/NaN means the information
    matrix could not be inverted, and such a version could neither be stored nor scored.
    """
    bad = ~np.isfinite(np.asarray(coef, dtype=float)) | ~np.isfinite(
        np.diag(np.asarray(cov, dtype=float))
    )
    if bad.any() or not np.isfinite(cov).all():
        names = [str(n) for n, b in zip(term_names, bad, strict=True) if b]
        raise FitError(
            "the fit has no finite coefficients or covariance for some terms "
            f"({', '.join(names[:10]) or 'off-diagonal'}); it cannot be stored",
            field="features",
            value=names[:10],
            remedy="remove or merge the terms named, rescale features in raw units with a "
            'tiny range, or use method "firth" or "ridge"',
            details={"terms": names},
        )


def commit_with_answer(
    session: Session, model: RiskModel, version: ModelVersion, times: StepTimes | None = None
) -> VersionPublic:
    """Flush, build and validate ``version``'s answer, then commit; roll back on any failure.

    ``times`` gets the laps ``store`` (flush and commit) and ``answer`` (build, validate).
    """
    times = times if times is not None else StepTimes()
    try:
        session.flush()
        times.lap("store")
        answer = version_answer(session, model, version)
        times.lap("answer")
        session.commit()
        times.lap("store")
    except BaseException:
        session.rollback()
        raise
    return answer


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
    times: StepTimes | None = None,
) -> tuple[RiskModel, ModelVersion, VersionPublic]:
    """Store a checked fit as the model's next version (first one: champion) with its answer.

    Returns ``(model, version, answer)``: the answer is the validated body of
    ``GET /risk-models/{model}/versions/{n}`` at the moment of the commit.
    """
    require_finite_fit(fit.coef, fit.cov, fit.term_names)
    options = spec.options
    table = json_finite(table)
    try:
        model = get_model(session=session, name=model_name)
        if model is None:
            model = create_model(
                session=session, name=model_name, description=spec.description or ""
            )
            session.flush()
        version = add_version(
            session=session,
            model=model,
            # Only the spec itself: a JSON fit request also carries its data, not kept here.
            spec=spec.model_dump(
                mode="json", include=set(VersionSpec.model_fields) - {"note", "description"}
            ),
            encoding=encoding.to_dict(),
            term_names=list(fit.term_names),
            coef=[float(c) for c in fit.coef],
            cov=np.asarray(fit.cov, dtype=float).tolist(),
            fit_stats=json_finite(fit_stats),
            term_table=table,
            method=fit.method,
            options={
                **options.model_dump(mode="json"),
                "confidence_level": confidence_level,
                "warnings": [*fit.warnings, *odds_ratio_warnings(table)],
            },
            training_ranges=json_finite(ranges),
            reference_distributions=json_finite(references),
            data_fingerprint=fingerprint,
            n_obs=fit.n_obs,
            n_events=float(fit.n_events),
            parent_number=None,
            origin="fit",
            origin_details={},
            note=spec.note or "",
            created_by_key_id=key_id,
        )
        if version.number == 1:
            set_champion(
                session=session, model=model, number=1, reason=FIRST_VERSION_REASON, key_id=key_id
            )
    except BaseException:
        session.rollback()
        raise
    return model, version, commit_with_answer(session, model, version, times)
