"""Model versions: append-only, numbered 1, 2, ... per model."""

from __future__ import annotations

from typing import Any

from sqlalchemy import select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from models_store._util import next_number
from models_store.orm import ORIGINS, ModelVersion, RiskModel
from service.errors import ConflictError, VersionNotFoundError

__all__ = ["add_version", "get_version", "latest_version", "list_versions", "require_version"]

_RESERVED = frozenset({"id", "model_id", "number", "model"})


def add_version(*, session: Session, model: RiskModel, **fields: Any) -> ModelVersion:
    """Store a new version with the next number (``fields`` are ModelVersion columns).

    The number is ``max + 1``; if another writer takes it first (possible on PostgreSQL),
    the unique constraint refuses this insert and :class:`ConflictError` is raised, nothing
    of this version being written. There is deliberately no update function.
    """
    reserved = _RESERVED.intersection(fields)
    if reserved:
        raise TypeError(f"add_version() sets {sorted(reserved)} itself")
    origin = fields.get("origin", "fit")
    if origin not in ORIGINS:
        raise ValueError(f"origin must be one of {ORIGINS}, not {origin!r}")
    number = next_number(session, ModelVersion.number, ModelVersion.model_id, model.id)
    version = ModelVersion(model_id=model.id, number=number, **fields)
    try:
        with session.begin_nested():
            session.add(version)
    except IntegrityError as error:
        if get_version(session=session, model=model, number=number) is None:
            raise
        raise ConflictError(
            f"version {number} of {model.name!r} was stored by another request at the same time",
            field="model",
            value=model.name,
            remedy="retry the request; it will be stored as the next version",
        ) from error
    return version


def get_version(*, session: Session, model: RiskModel, number: int) -> ModelVersion | None:
    """Version ``number`` of ``model``, or None."""
    stmt = select(ModelVersion).where(
        ModelVersion.model_id == model.id, ModelVersion.number == number
    )
    return session.scalar(stmt)


def require_version(*, session: Session, model: RiskModel, number: int) -> ModelVersion:
    """Version ``number`` of ``model``; :class:`VersionNotFoundError` if it does not exist."""
    version = get_version(session=session, model=model, number=number)
    if version is None:
        raise VersionNotFoundError(
            f"risk model {model.name!r} has no version {number}",
            field="version",
            value=number,
            remedy=f"list versions with GET /risk-models/{model.name}/versions",
        )
    return version


def list_versions(*, session: Session, model: RiskModel) -> list[ModelVersion]:
    """All versions of ``model`` in number order."""
    stmt = (
        select(ModelVersion).where(ModelVersion.model_id == model.id).order_by(ModelVersion.number)
    )
    return list(session.scalars(stmt))


def latest_version(*, session: Session, model: RiskModel) -> ModelVersion | None:
    """The highest-numbered version of ``model``, or None if it has none."""
    stmt = (
        select(ModelVersion)
        .where(ModelVersion.model_id == model.id)
        .order_by(ModelVersion.number.desc())
        .limit(1)
    )
    return session.scalar(stmt)
