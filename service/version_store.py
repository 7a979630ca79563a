"""Store a checked fit as a model's next version, in one commit.

The model row is created on its first fit; the first version becomes the champion with the
reason :data:`FIRST_VERSION_REASON`. Nothing is written unless the commit succeeds.
"""

from __future__ import annotations

from typing import Any

import numpy as np
from sqlalchemy.orm import Session

from models_store.champions import set_champion
from models_store.models import create_model, get_model
from models_store.orm import ModelVersion, RiskModel
from models_store.versions import add_version
from service.schemas import VersionSpec
from service.stats.design import Encoding
from service.stats.fit import LogisticFit

__all__ = ["FIRST_VERSION_REASON", "store_version"]

FIRST_VERSION_REASON = "first version"


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
