"""Request dependencies as ``Annotated`` aliases, so route signatures read like sentences.

* :data:`SettingsDep` - the app's :class:`~service.config.Settings`.
* :data:`SessionDep` - one SQLAlchemy session per request from ``app.state.session_factory``;
  domain operations commit, the session is closed (and anything uncommitted rolled back)
  when the request ends. Its writes are audited as the caller (``install_audit``). Only
  routes that name it get one: the key check and role gates take none.
* :data:`ModelDep` - the ``{model}`` path parameter loaded from the store, or
  :class:`~service.errors.ModelNotFoundError` (404). Written once here, never per route.
* :data:`ScorerAccess`, :data:`ModelerAccess`, :data:`AdminAccess` - role gates built by
  :func:`require_role`. Roles are ordered scorer < modeler < admin.

Dependencies that do no blocking I/O are ``async`` so that they run on the event loop
instead of costing a worker-thread hop each: the settings, making a session (it connects
lazily), closing one that holds no transaction, and a role check of a caller already
identified in this request. Everything that may touch the store runs in the thread pool.

Access: :func:`require_role` admits the caller identified by the router-level key check
:func:`service.security.authenticate_first` (401 for a missing, unknown or revoked key; 403
naming the role needed). Tests may install ``app.state.access_checker`` (a callable
``(request, role) -> Principal``) to replace it.
"""

from __future__ import annotations

from collections.abc import AsyncIterator, Awaitable, Callable
from dataclasses import dataclass
from typing import Annotated, Literal

from fastapi import Depends, Path, Request
from sqlalchemy.orm import Session
from starlette.concurrency import run_in_threadpool

from models_store.models import require_model
from models_store.orm import RiskModel
from service.config import Settings

__all__ = [
    "ROLE_RANK",
    "AdminAccess",
    "ModelDep",
    "ModelName",
    "ModelerAccess",
    "Principal",
    "Role",
    "ScorerAccess",
    "SessionDep",
    "SettingsDep",
    "get_model",
    "get_session",
    "get_settings_dep",
    "require_role",
]

Role = Literal["scorer", "modeler", "admin"]
ROLE_RANK: dict[str, int] = {"scorer": 1, "modeler": 2, "admin": 3}

ModelName = Annotated[
    str,
    Path(
        min_length=1,
        max_length=100,
        pattern=r"^[A-Za-z0-9][A-Za-z0-9._-]*$",
        description="Model name: letters, digits, '.', '_' or '-'; starts with a letter or digit.",
        examples=["water-main-breaks"],
    ),
]


@dataclass(frozen=True)
class Principal:
    """Who is calling: ``key_id`` is ``None`` while access control is off."""

    role: Role
    key_id: int | None = None
    name: str = "anonymous"


ANONYMOUS = Principal(role="admin")


async def get_settings_dep(request: Request) -> Settings:
    settings: Settings = request.app.state.settings
    return settings


SettingsDep = Annotated[Settings, Depends(get_settings_dep)]


async def get_session(request: Request) -> AsyncIterator[Session]:
    factory: Callable[[], Session] = request.app.state.session_factory
    session = factory()  # no connection yet: it is taken at the first statement
    principal: Principal | None = getattr(request.state, "riskfit_principal", None)
    if principal is not None:  # known already (the router's key check ran first): audit as it
        from service.security import install_audit  # security imports this module

        install_audit(session, key_id=principal.key_id)
    request.state.riskfit_session = session  # a caller identified later is audited on it
    try:
        yield session
    finally:
        request.state.riskfit_session = None
        if session.in_transaction():
            await run_in_threadpool(session.close)  # rolls back: a round trip to the store
        else:
            session.close()  # nothing held: no I/O


SessionDep = Annotated[Session, Depends(get_session)]


def get_model(model: ModelName, session: SessionDep) -> RiskModel:
    """Load the model named in the path or raise ``ModelNotFoundError`` (404)."""
    return require_model(session=session, name=model)


ModelDep = Annotated[RiskModel, Depends(get_model)]


def require_role(role: Role) -> Callable[..., Awaitable[Principal]]:
    """A dependency that admits callers holding ``role`` or a higher one.

    Checks the API key (:func:`service.security.authenticate_first`: 401 for a missing,
    unknown or revoked key, 403 naming the role needed) unless ``app.state.access_checker``
    replaces it. Takes no session: on the event loop, without I/O for a known caller.
    """

    async def check_access(request: Request) -> Principal:
        checker: Callable[[Request, Role], Principal] | None = getattr(
            request.app.state, "access_checker", None
        )
        if checker is not None:
            return await run_in_threadpool(checker, request, role)
        from service.security import admit  # security imports us

        return await admit(request, role)  # after the router-level check: a rank comparison

    check_access.__name__ = f"require_{role}"
    return check_access


ScorerAccess = Annotated[Principal, Depends(require_role("scorer"))]
ModelerAccess = Annotated[Principal, Depends(require_role("modeler"))]
AdminAccess = Annotated[Principal, Depends(require_role("admin"))]
