"""Risk models: create, look up, list."""

from __future__ import annotations

from sqlalchemy import select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from models_store.orm import RiskModel
from service.errors import ConflictError, ModelNotFoundError

__all__ = ["create_model", "get_model", "list_models", "model_not_found", "require_model"]


def create_model(*, session: Session, name: str, description: str = "") -> RiskModel:
    """Insert a new model; :class:`ConflictError` if the name is taken."""
    if get_model(session=session, name=name) is not None:
        raise _name_taken(name)
    model = RiskModel(name=name, description=description)
    try:
        with session.begin_nested():
            session.add(model)
    except IntegrityError as error:  # created concurrently by another request
        raise _name_taken(name) from error
    return model


def _name_taken(name: str) -> ConflictError:
    return ConflictError(
        f"a risk model named {name!r} already exists",
        field="name",
        value=name,
        remedy="choose another name, or add a version to the existing model",
    )


def get_model(*, session: Session, name: str) -> RiskModel | None:
    """The model called ``name``, or None."""
    return session.scalar(select(RiskModel).where(RiskModel.name == name))


def require_model(*, session: Session, name: str) -> RiskModel:
    """The model called ``name``; :class:`ModelNotFoundError` if there is none."""
    model = get_model(session=session, name=name)
    if model is None:
        raise model_not_found(name)
    return model


def model_not_found(name: str) -> ModelNotFoundError:
    """The 404 error for an unknown model ``name``."""
    return ModelNotFoundError(
        f"no risk model named {name!r}",
        field="model",
        value=name,
        remedy="list models with GET /risk-models, or fit one first",
    )


def list_models(*, session: Session, limit: int | None = None, offset: int = 0) -> list[RiskModel]:
    """Models ordered by name."""
    stmt = select(RiskModel).order_by(RiskModel.name).offset(offset).limit(limit)
    return list(session.scalars(stmt))
