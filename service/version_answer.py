"""The answer for one stored version, shared by the fit routes and ``GET .../versions/{n}``.

:func:`version_public` turns a stored row into the JSON-ready dict of
:class:`~service.schemas.VersionPublic`; :func:`version_answer` also validates it against the
schema. Every writer of versions (fit from a request or a server path, refits) calls
:func:`version_answer` after flushing the new row and before committing, so a version is
stored only together with an answer that can be built from it: should building or validating
fail, the writer rolls back and nothing is stored (see :mod:`service.version_store`).
"""

from __future__ import annotations

from typing import Any

from sqlalchemy.orm import Session

from models_store.champions import current_champion
from models_store.orm import ModelVersion, RiskModel
from service.schemas import VersionPublic

__all__ = ["version_answer", "version_public"]


def version_public(model: RiskModel, v: ModelVersion, champion: int | None) -> dict[str, Any]:
    """The JSON-ready dict of one version (the schema validates it; nothing is computed)."""
    options = dict(v.options or {})
    return {
        "model": model.name,
        "number": v.number,
        "created_at": v.created_at,
        "is_champion": v.number == champion,
        "spec": v.spec,
        "options": {k: val for k, val in options.items() if k != "warnings"},
        "encoding": v.encoding,
        "term_table": v.term_table,
        "fit_statistics": dict(v.fit_stats or {}),
        "warnings": [str(w) for w in options.get("warnings") or []],
        "training_ranges": v.training_ranges or {},
        "data_fingerprint": v.data_fingerprint,
        "lineage": {
            "parent": v.parent_number,
            "origin": v.origin,
            "details": v.origin_details or {},
        },
        "note": v.note or None,
    }


def version_answer(session: Session, model: RiskModel, v: ModelVersion) -> VersionPublic:
    """The validated answer for ``v`` as the GET route gives it (champion read in ``session``).

    Raises pydantic's ``ValidationError`` when the stored fields do not fit the schema: a
    writer calling this before its commit then rolls back.
    """
    champion = current_champion(session=session, model=model)
    return VersionPublic.model_validate(version_public(model, v, champion))
