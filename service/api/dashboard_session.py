"""Dashboard sign-in: a browser cannot send ``Authorization``, so it signs in once with a key.

Flow: ``GET /dashboard/sign-in`` shows a form; ``POST /dashboard/sign-in`` checks the key with
:func:`service.security.authorize` (the same check as every API route, role ``scorer`` or
higher) and answers 303 to the dashboard with a cookie holding a *session token*, never the
key. Dashboard routes then accept either that cookie or the usual key header
(:func:`dashboard_access`); ``POST /dashboard/sign-out`` clears the cookie.

Session token: ``<key id>.<expiry, epoch seconds>.<signature>`` where the signature is
base64url(HMAC-SHA256(secret, ``"riskfit-dashboard|<key id>|<expiry>"``)). The secret is the
setting ``RISKFIT_DASHBOARD_SESSION_SECRET``, or, when unset, 32 random bytes drawn once per
app (sign-ins then end when the server restarts, and each of several ``--workers`` has its
own secret: set the setting for more than one worker). A token is honoured only while
unexpired (``dashboard_session_hours``, default 8) and while its key is not revoked (the
key's role is read from the store on every request, so revocation ends the session at once).

Cookie: ``HttpOnly``, ``SameSite=Strict``, ``Path=/dashboard``, ``Secure`` when the request
came over https. Without credentials a request that accepts ``text/html`` (a browser) is sent
to the sign-in page (303); any other client gets the usual 401 JSON error.
"""

from __future__ import annotations

import base64
import hashlib
import hmac
import re
import secrets
import threading
import time
from urllib.parse import quote

from fastapi import HTTPException, Request
from fastapi.responses import RedirectResponse

from models_store.keys import get_key
from service.api.deps import Principal, SessionDep
from service.config import Settings
from service.security import authorize, install_audit

__all__ = [
    "COOKIE",
    "SIGN_IN_PATH",
    "dashboard_access",
    "safe_next",
    "sign_token",
    "signed_in_redirect",
    "verify_token",
]

COOKIE = "riskfit_dashboard"
SIGN_IN_PATH = "/dashboard/sign-in"
_CONTEXT = b"riskfit-dashboard|"
_NEXT = re.compile(r"^/dashboard(/[A-Za-z0-9][A-Za-z0-9._-]{0,99})?$")
_lock = threading.Lock()


def _secret(request: Request) -> bytes:
    settings: Settings = request.app.state.settings
    if settings.dashboard_session_secret is not None:
        return settings.dashboard_session_secret.get_secret_value().encode()
    with _lock:
        secret: bytes | None = getattr(request.app.state, "dashboard_secret", None)
        if secret is None:
            secret = request.app.state.dashboard_secret = secrets.token_bytes(32)
    return secret


def _signature(secret: bytes, key_id: int, expires: int) -> str:
    mac = hmac.new(secret, _CONTEXT + f"{key_id}|{expires}".encode(), hashlib.sha256)
    return base64.urlsafe_b64encode(mac.digest()).rstrip(b"=").decode()


def sign_token(secret: bytes, key_id: int, expires: int) -> str:
    """The session token of key ``key_id`` valid until ``expires`` (epoch seconds)."""
    return f"{key_id}.{expires}.{_signature(secret, key_id, expires)}"


def verify_token(secret: bytes, token: str, now: float) -> int | None:
    """The key id of a well-signed, unexpired token, else None (never raises)."""
    parts = token.split(".")
    if len(parts) != 3 or not (parts[0].isdigit() and parts[1].isdigit()) or len(token) > 200:
        return None
    key_id, expires = int(parts[0]), int(parts[1])
    if not hmac.compare_digest(parts[2], _signature(secret, key_id, expires)):
        return None
    return key_id if expires > now else None


def _cookie_principal(request: Request, session: SessionDep) -> Principal | None:
    token = request.cookies.get(COOKIE)
    if not token:
        return None
    key_id = verify_token(_secret(request), token, time.time())
    row = None if key_id is None else get_key(session=session, key_id=key_id)
    if row is None or row.revoked_at is not None:
        return None
    install_audit(session, key_id=row.id)
    principal = Principal(role=row.role, key_id=row.id, name=row.name)  # type: ignore[arg-type]
    request.state.riskfit_principal = principal
    return principal


def safe_next(value: str | None) -> str:
    """Where to go after signing in: a dashboard path only (no open redirect)."""
    return value if value and _NEXT.match(value) else "/dashboard"


def dashboard_access(request: Request, session: SessionDep) -> Principal:
    """Router dependency of the dashboard pages: the key header, or the session cookie.

    The key header (or access control off) goes through the API's own check, so a wrong key
    is a 401 as anywhere else. Otherwise a valid cookie admits its key's holder; failing
    that, a browser is redirected to the sign-in page and other clients get the 401.
    """
    settings: Settings = request.app.state.settings
    has_header = "authorization" in request.headers or "x-api-key" in request.headers
    if not settings.auth_required or has_header:
        return authorize(request, session, "scorer")
    principal = _cookie_principal(request, session)
    if principal is not None:
        return authorize(request, session, "scorer")  # the role check on the known principal
    if "text/html" in request.headers.get("accept", ""):
        target = f"{SIGN_IN_PATH}?next={quote(safe_next(request.url.path), safe='/')}"
        raise HTTPException(status_code=303, detail="sign in first", headers={"Location": target})
    return authorize(request, session, "scorer")  # raises the 401 naming the header


def signed_in_redirect(request: Request, principal: Principal, next_path: str) -> RedirectResponse:
    """303 to ``next_path`` with the session cookie of ``principal`` (no cookie if anonymous)."""
    response = RedirectResponse(safe_next(next_path), status_code=303)
    if principal.key_id is None:
        return response
    settings: Settings = request.app.state.settings
    seconds = int(settings.dashboard_session_hours * 3600)
    token = sign_token(_secret(request), principal.key_id, int(time.time()) + seconds)
    response.set_cookie(
        COOKIE,
        token,
        max_age=seconds,
        path="/dashboard",
        httponly=True,
        samesite="strict",
        secure=request.url.scheme == "https",
    )
    return response
