"""The one place where exceptions become HTTP answers.

Every error body has the same shape::

    {"error": {"code": str, "message": str, "field": str | null,
               "value": any | null, "remedy": str | null, "details"?: {...}}}

Status codes (decided here and nowhere else):

=============================================  ======
exception                                      status
=============================================  ======
NotFoundError (model, version, score)          404
ConflictError (duplicate key, outcome, refit)  409
InvalidInputError, FitError, NotEnoughOutcomes 422
LimitExceededError with ``field == "body"``    413
AuthenticationError                            401
PermissionDeniedError                          403
RequestTimeoutError (body stalled)             408
StoreError, SQLAlchemy Operational/Interface  503
other RiskfitError                             400
RequestValidationError (pydantic)              422
Starlette HTTPException (unknown path, verb)   its own status
anything else                                  500, logged, no internals in the body
=============================================  ======
"""

from __future__ import annotations

import logging
from collections.abc import Sequence
from typing import Any

from fastapi import FastAPI, Request
from fastapi.exceptions import RequestValidationError
from sqlalchemy.exc import InterfaceError, OperationalError
from starlette.exceptions import HTTPException as StarletteHTTPException
from starlette.routing import Match

from service.api.responses import JSONBytes
from service.errors import (
    AuthenticationError,
    ConflictError,
    FitError,
    InvalidInputError,
    LimitExceededError,
    NotEnoughOutcomesError,
    NotFoundError,
    PermissionDeniedError,
    RequestTimeoutError,
    RiskfitError,
    StoreError,
    _short,
)

__all__ = ["error_body", "install_error_handlers", "location_to_field", "status_for"]

log = logging.getLogger("riskfit.api")

# Most specific first: the first class an exception is an instance of decides.
_STATUS: tuple[tuple[type[RiskfitError], int], ...] = (
    (NotFoundError, 404),
    (ConflictError, 409),
    (AuthenticationError, 401),
    (PermissionDeniedError, 403),
    (RequestTimeoutError, 408),
    (StoreError, 503),
    (InvalidInputError, 422),
    (FitError, 422),
    (NotEnoughOutcomesError, 422),
)


def status_for(exc: RiskfitError) -> int:
    """HTTP status of a domain error (see the module table)."""
    if isinstance(exc, LimitExceededError) and exc.field == "body":
        return 413
    for cls, status in _STATUS:
        if isinstance(exc, cls):
            return status
    return 400


def error_body(
    code: str,
    message: str,
    *,
    field: str | None = None,
    value: Any = None,
    remedy: str | None = None,
    details: dict[str, Any] | None = None,
) -> dict[str, Any]:
    """The shared error body; ``field``, ``value`` and ``remedy`` are always present."""
    inner: dict[str, Any] = {
        "code": code,
        "message": message,
        "field": field,
        "value": _short(value) if value is not None else None,
        "remedy": remedy,
    }
    if details:
        inner["details"] = details
    return {"error": inner}


def location_to_field(loc: Sequence[str | int]) -> str:
    """``("body", "records", 3, "age")`` -> ``"records[3].age"`` (the request part is dropped)."""
    parts = list(loc)
    if parts and parts[0] in ("body", "query", "path", "header", "cookie"):
        source = parts.pop(0)
        if not parts:
            return str(source)
    out = ""
    for part in parts:
        if isinstance(part, int):
            out += f"[{part}]"
        else:
            out += f".{part}" if out else str(part)
    return out


async def _riskfit_error(request: Request, exc: Exception) -> JSONBytes:
    assert isinstance(exc, RiskfitError)
    status = status_for(exc)
    if status >= 500:
        log.warning("store error on %s %s: %s", request.method, request.url.path, exc)
    d = exc.to_dict()
    body = error_body(
        exc.code,
        exc.message,
        field=exc.field,
        value=exc.value,
        remedy=exc.remedy,
        details=d.get("details"),
    )
    headers = {"WWW-Authenticate": "Bearer"} if status == 401 else None
    return JSONBytes(body, status_code=status, headers=headers)


async def _validation_error(request: Request, exc: Exception) -> JSONBytes:
    assert isinstance(exc, RequestValidationError)
    errors = list(exc.errors())
    first = errors[0] if errors else {"loc": ("body",), "msg": "invalid request", "input": None}
    field = location_to_field(tuple(first.get("loc") or ("body",)))
    value = first.get("input")
    if isinstance(value, dict | list):
        value = None if first.get("type") == "missing" else _short(value, 120)
    message = f"{field}: {first.get('msg', 'invalid value')}"
    if len(errors) > 1:
        message += f" (and {len(errors) - 1} more problem(s))"
    details = {
        "problems": [
            {"field": location_to_field(e.get("loc", ())), "message": e.get("msg", "")}
            for e in errors[:20]
        ]
    }
    ctx = first.get("ctx")
    remedy = ctx.get("remedy") if isinstance(ctx, dict) else None  # a validator's own remedy
    if not isinstance(remedy, str):
        remedy = None
    remedy = (
        remedy or f"Send {field} as the API schema at /docs describes ({first.get('msg', '')})."
    )
    body = error_body(
        "invalid_request", message, field=field, value=value, remedy=remedy, details=details
    )
    return JSONBytes(body, status_code=422)


_CANDIDATES = ("GET", "HEAD", "POST", "PUT", "PATCH", "DELETE", "OPTIONS")


def allowed_methods(request: Request) -> list[str]:
    """Every method some route serves at this request's path, found by asking each route
    whether it fully matches the path with that method (Starlette's own ``Allow`` names only
    the methods of the first route matching the path, not the others at the same path)."""
    routes = request.app.router.routes
    return [
        m
        for m in _CANDIDATES
        if any(r.matches({**request.scope, "method": m})[0] == Match.FULL for r in routes)
    ]


async def _http_error(request: Request, exc: Exception) -> JSONBytes:
    assert isinstance(exc, StarletteHTTPException)
    codes = {404: "no_such_path", 405: "method_not_allowed"}
    remedy = {
        404: "See /docs for the paths riskfit serves.",
        405: "See /docs for the methods this path accepts.",
    }.get(exc.status_code)
    headers = dict(getattr(exc, "headers", None) or {})
    if exc.status_code == 405:
        allow = allowed_methods(request)
        if allow:
            headers["Allow"] = ", ".join(allow)
            remedy = f"Use one of {', '.join(allow)} on this path (see /docs)."
    body = error_body(
        codes.get(exc.status_code, "http_error"),
        str(exc.detail),
        field="method" if exc.status_code == 405 else "path",
        value=request.method if exc.status_code == 405 else request.url.path,
        remedy=remedy,
    )
    return JSONBytes(body, status_code=exc.status_code, headers=headers or None)


async def _database_error(request: Request, exc: Exception) -> JSONBytes:
    log.error("database error on %s %s", request.method, request.url.path, exc_info=exc)
    body = error_body(
        "store_unavailable",
        "The database did not answer; nothing was changed by this request.",
        remedy="Retry in a moment; if it persists, check the database (GET /readyz).",
    )
    return JSONBytes(body, status_code=503, headers={"Retry-After": "5"})


async def _unexpected_error(request: Request, exc: Exception) -> JSONBytes:
    log.error("unhandled error on %s %s", request.method, request.url.path, exc_info=exc)
    body = error_body(
        "internal_error",
        "riskfit failed unexpectedly while handling this request; it has been logged.",
        remedy="Retry; if it recurs, report the time of the request to the operator.",
    )
    return JSONBytes(body, status_code=500)


def install_error_handlers(app: FastAPI) -> None:
    """Register every handler above on ``app``."""
    app.add_exception_handler(RiskfitError, _riskfit_error)
    app.add_exception_handler(RequestValidationError, _validation_error)
    app.add_exception_handler(StarletteHTTPException, _http_error)
    app.add_exception_handler(OperationalError, _database_error)
    app.add_exception_handler(InterfaceError, _database_error)
    app.add_exception_handler(Exception, _unexpected_error)
