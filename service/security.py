"""API keys, roles and the audit trail.

Keys
----
A key is ``rfk_`` (:data:`KEY_PREFIX`) followed by :func:`secrets.token_urlsafe` of
:data:`KEY_BYTES` random bytes (256 bits). Keys issued before the prefix changed start with
``rk_`` (:data:`LEGACY_KEY_PREFIXES`, the prefix a well-known payments API gives its
restricted keys, so secret scanners confused the two); they keep working, since a key is found
by its hash, never by its prefix. It is shown once, when it is created; the store keeps only

* ``key_hash`` = hex SHA-256 of the key, or hex HMAC-SHA256 keyed by the server secret
  ``RISKFIT_API_KEY_PEPPER`` when one is set (then a stolen database alone cannot be used to
  test guesses offline);
* ``prefix`` = the first :data:`PREFIX_LEN` characters, so people can tell keys apart in lists.

A request presents the key as ``Authorization: Bearer <key>`` or ``X-API-Key: <key>``. The key
is looked up by its hash (a unique index) and the stored hash is compared once more with
:func:`hmac.compare_digest`. Keys never reach a log line or an error body.

Roles are ordered ``scorer < modeler < admin``; a route states the least role it admits.

Key check cost
--------------
:func:`authenticate_first` runs on the event loop. With ``auth_required`` off it does no I/O at
all. With it on, each app keeps a small in-process cache ``key_hash -> (key id, name, role,
prefix, revoked_at)`` (:class:`~service.key_cache.KeyCache`); an entry is trusted for
:data:`KEY_CACHE_TTL` seconds after it was read from the store, so a request with a recently
seen key costs no worker-thread hop and no store read, and an unseen or stale key costs one hop
(the store read, and the ``last_used_at`` touch). Revocation through :func:`revoke` evicts the
key from every cache of this process (at once, and again when the revoking transaction
commits); a revocation made elsewhere (another worker process, ``riskfit keys revoke``) takes
effect within :data:`KEY_CACHE_TTL` seconds. Unknown keys are never cached. Both 401 messages
and the 403 role check are the same whether the key came from the cache or the store.

Audit
-----
:func:`install_audit` hooks a session so that, in the same transaction as the change itself,
every new model version (``version.create``), champion change (``champion.change``), refit run
(``refit.start``) and refit status change (``refit.finish``) appends an ``audit_event`` row
with the acting key id. Key creation and revocation are recorded by :func:`issue_key` and
:func:`revoke` (``key.create``, ``key.revoke``). Revoking a key also ends every dashboard
session signed in with it (:mod:`service.api.dashboard_session`).
"""

from __future__ import annotations

import contextlib
import hashlib
import hmac
import secrets
from dataclasses import dataclass
from typing import Any

from fastapi import Request
from sqlalchemy import event
from sqlalchemy.orm import Session
from starlette.concurrency import run_in_threadpool

from models_store.audit import record
from models_store.dashboard_sessions import end_sessions_of_key
from models_store.keys import create_key, find_key_by_hash, get_key, revoke_key, touch_key
from models_store.orm import ApiKey
from service.api.deps import ANONYMOUS, ROLE_RANK, Principal
from service.audit_hook import install_audit
from service.config import Settings
from service.errors import (
    AuthenticationError,
    ConflictError,
    NotFoundError,
    PermissionDeniedError,
)
from service.key_cache import KEY_CACHE_TTL, KeyCache, _cache_of, _forget_everywhere, _KeyFacts

__all__ = [
    "KEY_CACHE_TTL",
    "KEY_PREFIX",
    "LEGACY_KEY_PREFIXES",
    "IssuedKey",
    "KeyCache",
    "admit",
    "authenticate_first",
    "authorize",
    "caller_known",
    "hash_key",
    "install_audit",
    "issue_key",
    "new_key",
    "own_key_headers",
    "presented_key",
    "revoke",
]

KEY_PREFIX = "rfk_"
LEGACY_KEY_PREFIXES = ("rk_",)  # issued before 0.1.x; still accepted (looked up by hash)
KEY_BYTES = 32
PREFIX_LEN = 10
_CREATE_HINT = "an admin creates one with `riskfit keys create --role scorer` or POST /api-keys"


@dataclass(frozen=True)
class IssuedKey:
    """A key just created: ``key`` is the only copy of the secret anywhere."""

    id: int
    name: str
    role: str
    prefix: str
    key: str


def new_key() -> str:
    """A fresh random key: ``rfk_`` + 43 URL-safe characters (256 random bits)."""
    return KEY_PREFIX + secrets.token_urlsafe(KEY_BYTES)


def hash_key(key: str, settings: Settings) -> str:
    """Hex digest stored for ``key``: HMAC-SHA256 with the pepper if set, else SHA-256."""
    data = key.encode("utf-8", "surrogatepass")
    if settings.api_key_pepper is not None:
        pepper = settings.api_key_pepper.get_secret_value().encode()
        return hmac.new(pepper, data, hashlib.sha256).hexdigest()
    return hashlib.sha256(data).hexdigest()


def issue_key(
    *, session: Session, settings: Settings, role: str, name: str, by_key_id: int | None = None
) -> IssuedKey:
    """Create and store a key (hash only) and its ``key.create`` audit event; no commit."""
    key = new_key()
    row = create_key(
        session=session,
        name=name,
        role=role,
        key_hash=hash_key(key, settings),
        prefix=key[:PREFIX_LEN],
    )
    session.flush()
    record(
        session=session,
        action="key.create",
        key_id=by_key_id,
        details={"key_id": row.id, "role": role, "name": name, "prefix": row.prefix},
    )
    return IssuedKey(id=row.id, name=row.name, role=row.role, prefix=row.prefix, key=key)


def revoke(*, session: Session, key_id: int, by_key_id: int | None = None) -> ApiKey:
    """Revoke key ``key_id`` (idempotent) and record ``key.revoke``; no commit."""
    existing = get_key(session=session, key_id=key_id)
    if existing is None:
        raise NotFoundError(
            f"there is no API key with id {key_id}",
            field="key_id",
            value=key_id,
            remedy="list the keys (GET /api-keys or `riskfit keys list`) for their ids",
        )
    if by_key_id is not None and by_key_id == key_id:
        raise ConflictError(
            f"API key {key_id} cannot revoke itself",
            field="key_id",
            value=key_id,
            remedy="revoke it with another admin key, or with `riskfit keys revoke`",
        )
    was_active = existing.revoked_at is None
    row = revoke_key(session=session, key_id=key_id)
    assert row is not None
    end_sessions_of_key(session=session, key_id=key_id)  # its dashboard sign-ins end too
    digest = row.key_hash
    _forget_everywhere(digest)  # this process's caches; other processes: KEY_CACHE_TTL
    event.listen(session, "after_commit", lambda _s: _forget_everywhere(digest), once=True)
    if was_active:
        record(
            session=session,
            action="key.revoke",
            key_id=by_key_id,
            details={"key_id": row.id, "role": row.role, "prefix": row.prefix},
        )
    return row


def presented_key(request: Request) -> str | None:
    """The key sent as ``Authorization: Bearer <key>`` or ``X-API-Key``, else None."""
    auth = request.headers.get("authorization")
    if auth:
        scheme, _, value = auth.partition(" ")
        if scheme.lower() == "bearer" and value.strip():
            return value.strip()
        raise AuthenticationError(
            "the Authorization header is not of the form 'Bearer <key>'",
            field="Authorization",
            value=scheme[:20],
            remedy="send Authorization: Bearer <key> (or the header X-API-Key: <key>)",
        )
    key = request.headers.get("x-api-key", "").strip()
    return key or None


def _unknown_key() -> AuthenticationError:
    return AuthenticationError(
        "the API key is not known to this service",
        field="Authorization",
        value=None,  # never echo a key, not even part of it
        remedy=f"check the key you sent; {_CREATE_HINT}",
    )


def _checked(facts: _KeyFacts, digest: str) -> _KeyFacts:
    """``facts`` when their hash is ``digest`` and the key is not revoked; else the 401."""
    if not hmac.compare_digest(facts.key_hash, digest):
        raise _unknown_key()
    if facts.revoked_at is not None:
        raise AuthenticationError(
            f"API key {facts.prefix}... (id {facts.id}) was revoked at "
            f"{facts.revoked_at.isoformat()}",
            field="Authorization",
            value=facts.prefix,
            remedy=f"use a current key; {_CREATE_HINT}",
        )
    return facts


def _known_key(session: Session, settings: Settings, key: str, cache: KeyCache) -> ApiKey:
    digest = hash_key(key, settings)
    row = find_key_by_hash(session=session, key_hash=digest, active_only=False)
    if row is None:
        raise _unknown_key()
    cache.put(row)
    _checked(
        _KeyFacts(row.id, row.name, row.role, row.prefix, row.key_hash, row.revoked_at), digest
    )
    return row


def _rank_check(request: Request, known: Principal, role: str) -> Principal:
    if ROLE_RANK[known.role] < ROLE_RANK[role]:
        raise PermissionDeniedError(
            f"{request.method} {request.url.path} needs the role {role!r} or higher; "
            f"key {known.name!r} (id {known.key_id}) has the role {known.role!r}",
            field="role",
            value=known.role,
            remedy=f"use a key with the role {role!r} or higher (roles: scorer < modeler < admin)",
            details={"required_role": role},
        )
    return known


def authorize(request: Request, session: Session, role: str) -> Principal:
    """The caller of ``request`` if it holds ``role`` or a higher one.

    Raises :class:`AuthenticationError` (401) for a missing, unknown or revoked key and
    :class:`PermissionDeniedError` (403) naming the role needed. With ``auth_required`` off,
    every caller is an anonymous admin. Either way the session's writes are audited.
    May read the store: call it from a worker thread (see :func:`authenticate_first`).
    """
    known: Principal | None = getattr(request.state, "riskfit_principal", None)
    if known is None:
        known = _quick_principal(request) or _principal(request, session)
        request.state.riskfit_principal = known
    install_audit(session, key_id=known.key_id)
    return _rank_check(request, known, role)


def _required_key(request: Request) -> str:
    key = presented_key(request)
    if key is None:
        raise AuthenticationError(
            f"{request.method} {request.url.path} needs an API key",
            field="Authorization",
            value=None,
            remedy=f"send Authorization: Bearer <key> (or X-API-Key: <key>); {_CREATE_HINT}",
        )
    return key


def _quick_principal(request: Request) -> Principal | None:
    """The caller without I/O (auth off, or a fresh cache entry for its key), else None."""
    settings: Settings = request.app.state.settings
    if not settings.auth_required:
        return ANONYMOUS
    digest = hash_key(_required_key(request), settings)
    facts = _cache_of(request.app).get(digest)
    if facts is None:
        return None
    _checked(facts, digest)
    return Principal(role=facts.role, key_id=facts.id, name=facts.name)  # type: ignore[arg-type]


def _principal(request: Request, session: Session) -> Principal:
    """The caller from the presented key read from the store (401: missing/unknown/revoked)."""
    settings: Settings = request.app.state.settings
    row = _known_key(session, settings, _required_key(request), _cache_of(request.app))
    if touch_key(session=session, key=row):
        session.commit()  # last_used_at, at most once a minute per key
    return Principal(role=row.role, key_id=row.id, name=row.name)  # type: ignore[arg-type]


def _principal_from_store(request: Request) -> Principal:
    """:func:`_principal` in a session of its own (a worker thread: it reads the store)."""
    with request.app.state.session_factory() as session:
        return _principal(request, session)


_ROLE_ATTR = "_riskfit_least_role"  # the answer of _route_role, kept on the route object
_UNKNOWN = object()


def _route_role(route: Any) -> str | None:
    """The least role a route admits: the ``require_<role>`` among its dependencies."""
    if route is None:
        return None
    known = getattr(route, _ROLE_ATTR, _UNKNOWN)
    if known is not _UNKNOWN:
        return known  # type: ignore[return-value]
    role = None
    dependant = getattr(route, "dependant", None)
    for dep in getattr(dependant, "dependencies", ()):
        name = getattr(dep.call, "__name__", "")
        if name.startswith("require_") and name[8:] in ROLE_RANK:
            role = name[8:]
            break
    with contextlib.suppress(AttributeError):  # a route class with __slots__: look again
        setattr(route, _ROLE_ATTR, role)
    return role


async def authenticate_first(request: Request) -> None:
    """Router-level dependency: check the key before anything else the route depends on.

    Without it a route's path lookups (``ModelDep``) could answer 404 to a caller without a
    key, telling strangers which models exist. Routes with no role gate stay open. Runs on
    the event loop: no thread hop with auth off or a fresh cached key, one for a store read
    (in a session of its own). It takes no request session, so a route that needs none (a
    score request) makes none; :func:`service.api.deps.get_session` hooks the audit of the
    request's session to the caller found here (:func:`caller_known`).
    """
    role = _route_role(request.scope.get("route"))
    if role is not None:
        await admit(request, role)


async def admit(request: Request, role: str) -> Principal:
    """The caller of ``request`` if it holds ``role`` (401/403 as :func:`authorize`).

    Identifies the caller once per request (no I/O with auth off or a fresh cached key, one
    thread hop for a store read); later calls are a rank comparison.
    """
    known: Principal | None = getattr(request.state, "riskfit_principal", None)
    if known is None:
        known = _quick_principal(request)
        if known is None:
            known = await run_in_threadpool(_principal_from_store, request)
        caller_known(request, known)
    return _rank_check(request, known, role)


def caller_known(request: Request, principal: Principal) -> None:
    """Remember the caller of ``request``; a session the request already has is audited as it."""
    request.state.riskfit_principal = principal
    session: Session | None = getattr(request.state, "riskfit_session", None)
    if session is not None:
        install_audit(session, key_id=principal.key_id)


def own_key_headers(app: Any, *, role: str = "modeler", name: str = "demo") -> dict[str, str]:
    """For a client inside the process (the demo): a new key, printed once, as headers.

    Returns ``{}`` when ``app`` checks no keys. Needs the app's lifespan entered (the store).
    """
    settings: Settings = app.state.settings
    if not settings.auth_required:
        return {}
    session = app.state.session_factory()
    try:
        issued = issue_key(session=session, settings=settings, role=role, name=name)
        session.commit()
    finally:
        session.close()
    print(f"riskfit demo: created API key id {issued.id} (role {role}) for itself: {issued.key}")
    return {"Authorization": f"Bearer {issued.key}"}
