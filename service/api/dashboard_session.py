"""Dashboard sign-in: a browser cannot send ``Authorization``, so it signs in once with a key.

Flow: ``GET /dashboard/sign-in`` shows a form; ``POST /dashboard/sign-in`` checks the key with
:func:`service.security.authorize` (the same check as every API route, role ``scorer`` or
higher) and answers 303 to the dashboard with a cookie holding a *session token*, never the
key. Dashboard routes then accept either that cookie or the usual key header
(:func:`dashboard_access`); ``POST /dashboard/sign-out`` ends the session and clears the cookie.

Sessions live in the store (table ``dashboard_session``, :mod:`models_store.dashboard_sessions`):
the cookie holds 256 random bits (:func:`secrets.token_urlsafe`), the row only their SHA-256,
the key id and the expiry (``dashboard_session_hours``, default 8). A session is honoured only
while unexpired, not signed out and while its key is not revoked; every request reads the row
(one indexed statement), so sign-out and key revocation end it at once in every server
process, on SQLite and PostgreSQL alike.

Cross-site request forgery (both forms):

* Origin check: a POST whose ``Origin`` (or, without one, ``Referer``) names another host than
  the request's own ``Host`` header is refused (403). Clients that send neither (curl, tests)
  pass this check.
* Tokens: the sign-in form carries ``csrf_token``, which must equal the ``riskfit_csrf``
  cookie set with the form (a double-submit token: another site can neither read the cookie
  nor, with ``SameSite=Strict``, make the browser send it). The sign-out form carries a token
  derived from the session token (SHA-256 of a context string and the token), which only a
  page rendered for that session knows.

Cookies: ``HttpOnly``, ``SameSite=Strict``, ``Path=/dashboard``; ``Secure`` as the setting
``cookie_secure`` says (auto: when the request came over https, as seen through a trusted
proxy). Without credentials a request that accepts ``text/html`` (a browser) is sent to the
sign-in page (303); any other client gets the usual 401 JSON error.
"""

from __future__ import annotations

import hashlib
import hmac
import re
import secrets
from datetime import timedelta
from urllib.parse import quote, urlsplit

from fastapi import HTTPException, Request
from fastapi.responses import RedirectResponse, Response
from sqlalchemy.orm import Session

from models_store._types import utcnow
from models_store.dashboard_sessions import create_session, end_session, live_session
from service.api.deps import Principal, SessionDep
from service.config import Settings
from service.errors import PermissionDeniedError
from service.security import authorize, install_audit

__all__ = [
    "COOKIE",
    "CSRF_COOKIE",
    "SIGN_IN_PATH",
    "check_origin",
    "check_sign_in_token",
    "dashboard_access",
    "end_signed_in_session",
    "safe_next",
    "sign_in_token",
    "sign_out_token",
    "signed_in_redirect",
    "token_hash",
]

COOKIE = "riskfit_dashboard"
CSRF_COOKIE = "riskfit_csrf"
SIGN_IN_PATH = "/dashboard/sign-in"
_NEXT = re.compile(r"^/dashboard(/[A-Za-z0-9][A-Za-z0-9._-]{0,99})?$")
_TOKEN_BYTES = 32
_MAX_TOKEN = 200


def token_hash(token: str) -> str:
    """Hex SHA-256 of a session token: what the store keeps."""
    return hashlib.sha256(token.encode("utf-8", "surrogatepass")).hexdigest()


def sign_out_token(session_token: str) -> str:
    """The sign-out form's CSRF token of a session (derived: nothing more is stored)."""
    data = b"riskfit-sign-out|" + session_token.encode("utf-8", "surrogatepass")
    return hashlib.sha256(data).hexdigest()


def cookie_secure(request: Request) -> bool:
    """Whether cookies set in answer to ``request`` carry ``Secure`` (setting ``cookie_secure``)."""
    settings: Settings = request.app.state.settings
    if settings.cookie_secure == "auto":
        return request.url.scheme == "https"
    return settings.cookie_secure == "always"


def _forbidden(message: str, field: str, value: str | None, remedy: str) -> PermissionDeniedError:
    return PermissionDeniedError(message, field=field, value=value, remedy=remedy)


def check_origin(request: Request) -> None:
    """403 unless the request's ``Origin`` (else ``Referer``), if any, is its own host."""
    host = request.headers.get("host", "").lower()
    for header in ("origin", "referer"):
        value = request.headers.get(header)
        if value is None:
            continue
        try:
            netloc = urlsplit(value).netloc.lower()
        except ValueError:
            netloc = ""
        if not netloc or netloc != host:
            raise _forbidden(
                f"{request.method} {request.url.path} came from another site ({header} "
                f"{value[:100]!r}, this host {host[:100]!r})",
                header.capitalize(),
                value[:100],
                "use the form on this dashboard's own pages; behind a reverse proxy, pass "
                "the original Host header through (e.g. nginx: proxy_set_header Host $host)",
            )
        return  # Origin decides when present; Referer only without it


def sign_in_token(request: Request) -> tuple[str, bool]:
    """The double-submit token for the sign-in form and whether its cookie must be set."""
    current = request.cookies.get(CSRF_COOKIE, "")
    if 20 <= len(current) <= _MAX_TOKEN:
        return current, False
    return secrets.token_urlsafe(_TOKEN_BYTES), True


def set_csrf_cookie(request: Request, response: Response, token: str) -> None:
    response.set_cookie(
        CSRF_COOKIE,
        token,
        path="/dashboard",
        httponly=True,
        samesite="strict",
        secure=cookie_secure(request),
    )


def check_sign_in_token(request: Request, form_token: str | None) -> None:
    """403 unless the form's ``csrf_token`` equals the ``riskfit_csrf`` cookie."""
    cookie = request.cookies.get(CSRF_COOKIE, "")
    if not cookie or not form_token or not hmac.compare_digest(cookie, form_token):
        raise _forbidden(
            "the sign-in form's csrf_token does not match this browser's riskfit_csrf cookie",
            "csrf_token",
            None,
            f"open {SIGN_IN_PATH} again and submit the form from there (cookies enabled)",
        )


def _cookie_principal(request: Request, session: Session) -> Principal | None:
    token = request.cookies.get(COOKIE)
    if not token or len(token) > _MAX_TOKEN:
        return None
    found = live_session(session=session, token_hash=token_hash(token))
    if found is None:
        return None
    row = found[1]
    install_audit(session, key_id=row.id)
    principal = Principal(role=row.role, key_id=row.id, name=row.name)  # type: ignore[arg-type]
    request.state.riskfit_principal = principal
    request.state.riskfit_sign_out_token = sign_out_token(token)
    return principal


def safe_next(value: str | None) -> str:
    """Where to go after signing in: a dashboard path only (no open redirect)."""
    return value if value and _NEXT.match(value) else "/dashboard"


def dashboard_access(request: Request, session: SessionDep) -> Principal:
    """Router dependency of the dashboard pages: the key header, or the session cookie.

    The key header (or access control off) goes through the API's own check, so a wrong key
    is a 401 as anywhere else. Otherwise a live session cookie admits its key's holder;
    failing that, a browser is redirected to the sign-in page and other clients get the 401.
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


def signed_in_redirect(
    request: Request, session: Session, principal: Principal, next_path: str
) -> RedirectResponse:
    """303 to ``next_path`` with a new session cookie of ``principal`` (none if anonymous)."""
    response = RedirectResponse(safe_next(next_path), status_code=303)
    if principal.key_id is None:
        return response
    settings: Settings = request.app.state.settings
    seconds = int(settings.dashboard_session_hours * 3600)
    token = secrets.token_urlsafe(_TOKEN_BYTES)
    create_session(
        session=session,
        token_hash=token_hash(token),
        key_id=principal.key_id,
        expires_at=utcnow() + timedelta(seconds=seconds),
    )
    session.commit()
    response.set_cookie(
        COOKIE,
        token,
        max_age=seconds,
        path="/dashboard",
        httponly=True,
        samesite="strict",
        secure=cookie_secure(request),
    )
    return response


def end_signed_in_session(request: Request, session: Session, form_token: str | None) -> None:
    """Sign-out: end the cookie's session in the store (403 on a wrong ``csrf_token``)."""
    check_origin(request)
    token = request.cookies.get(COOKIE)
    if not token or len(token) > _MAX_TOKEN:
        return  # nothing to end
    if not form_token or not hmac.compare_digest(form_token, sign_out_token(token)):
        raise _forbidden(
            "the sign-out form's csrf_token does not belong to this session",
            "csrf_token",
            None,
            "sign out with the button on a dashboard page",
        )
    end_session(session=session, token_hash=token_hash(token))
    session.commit()
