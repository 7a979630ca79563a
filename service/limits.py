"""Size limits on requests, enforced before any work is done (settings in service/config.py).

Two seams:

* :class:`LimitsMiddleware` (pure ASGI) bounds every request body: a JSON body (anything not
  ``multipart/form-data``) may hold at most ``max_body_bytes``, an upload at most
  ``max_upload_bytes`` (413 either way, judged from ``Content-Length`` and again while the
  bytes arrive). A JSON body is then walked once, without recursion, for the structural
  limits (422 naming the path): nesting depth (``max_json_depth``), string length
  (``max_string_length``), records or outcomes per request (``max_records_per_request``),
  training rows sent as JSON (``max_json_fit_rows``; larger fits go as uploads), features and
  listed levels (``max_features``, ``max_levels``).
* :func:`check_training_data` bounds what a fit reads however it was sent (uploads too): rows
  (``max_fit_rows``), distinct levels of each categorical feature and their lengths.
* :func:`service.fit_size.check_fit_size` bounds the fit itself once its encoding is known and
  before any design matrix exists: terms (``max_terms``), terms against rows, and the
  estimated memory (``fit_memory_budget_mb``); every fit path calls it.

Large bodies are not walked in Python when nothing is over a limit: the byte scan
:func:`service.json_scan.may_exceed` (re-exported here) says whether anything *may* be over.
Only when it finds a possible excess does :func:`check_json_body` walk the body, so the
error (its path, value and wording) is the one the walk gives. The parsed body is left in
``scope["riskfit.json"]`` for routes that read JSON themselves (one parse per request).
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from typing import Any

import numpy as np
import orjson
from starlette.types import ASGIApp, Message, Receive, Scope, Send

from service.config import Settings
from service.errors import InvalidInputError, LimitExceededError, RiskfitError
from service.json_scan import may_exceed  # re-exported: the byte scan lives there

__all__ = [
    "JSON_SCOPE_KEY",
    "LimitsMiddleware",
    "check_json_body",
    "check_training_data",
    "may_exceed",
    "too_large",
]

_BODY_METHODS = frozenset({"POST", "PUT", "PATCH", "DELETE"})
_SETTING_HINT = "(an operator may raise RISKFIT_{name})"
JSON_SCOPE_KEY = "riskfit.json"  # the parsed JSON body, for a route that reads it itself


def too_large(what: str, size: int, limit: int, setting: str, remedy: str) -> LimitExceededError:
    """The 413 error (``field="body"``) for a body over ``limit`` bytes."""
    return LimitExceededError(
        f"the {what} holds {size} bytes or more; the limit is {limit} bytes",
        field="body",
        value=size,
        remedy=f"{remedy} {_SETTING_HINT.format(name=setting.upper())}",
        details={"limit": limit, "setting": setting},
    )


def _over(field: str, what: str, size: int, limit: int, setting: str, remedy: str) -> None:
    if size > limit:
        raise LimitExceededError(
            f"{field} holds {size} {what}; the limit is {limit}",
            field=field,
            value=size,
            remedy=f"{remedy} {_SETTING_HINT.format(name=setting.upper())}",
            details={"limit": limit, "setting": setting},
        )


def _path(parts: tuple[str | int, ...]) -> str:
    out = ""
    for p in parts:
        out += f"[{p}]" if isinstance(p, int) else (f".{p}" if out else p)
    return out or "body"


def _list_limit(parts: tuple[str | int, ...], s: Settings) -> tuple[str, int, str, str] | None:
    """(unit, limit, setting, remedy) for the list at ``parts``, or None when unbounded here."""
    if parts in (("records",), ("outcomes",)):
        return (
            "items",
            s.max_records_per_request,
            "max_records_per_request",
            "split the batch into several requests",
        )
    if parts == ("data", "rows") or (len(parts) == 3 and parts[:2] == ("data", "columns")):
        return (
            "rows",
            s.max_json_fit_rows,
            "max_json_fit_rows",
            "send larger training data as a CSV or Parquet upload (multipart/form-data)",
        )
    if parts == ("features",):
        return ("features", s.max_features, "max_features", "fit fewer features")
    if len(parts) == 3 and parts[0] == "features" and parts[2] == "levels":
        return ("levels", s.max_levels, "max_levels", "merge rare levels into fewer groups")
    return None


def check_json_body(body: Any, settings: Settings) -> None:
    """Walk a parsed JSON body (iteratively) and raise :class:`LimitExceededError` (422)."""
    max_str, max_depth = settings.max_string_length, settings.max_json_depth
    stack: list[tuple[Any, tuple[str | int, ...]]] = [(body, ())]
    while stack:
        node, parts = stack.pop()
        if len(parts) >= max_depth:
            _over(
                _path(parts),
                "levels of nesting",
                len(parts) + 1,
                max_depth,
                "max_json_depth",
                "flatten the request",
            )
        if isinstance(node, dict):
            for k, v in node.items():
                if len(k) > max_str:
                    _over(
                        _path(parts),
                        "characters in a name",
                        len(k),
                        max_str,
                        "max_string_length",
                        "use shorter names",
                    )
                if isinstance(v, dict | list):
                    stack.append((v, (*parts, k)))
                elif isinstance(v, str) and len(v) > max_str:
                    _over(
                        _path((*parts, k)),
                        "characters",
                        len(v),
                        max_str,
                        "max_string_length",
                        "send shorter text",
                    )
        elif isinstance(node, list):
            rule = _list_limit(parts, settings)
            if rule is not None:
                _over(_path(parts), rule[0], len(node), rule[1], rule[2], rule[3])
            for i, v in enumerate(node):
                if isinstance(v, dict | list):
                    stack.append((v, (*parts, i)))
                elif isinstance(v, str) and len(v) > max_str:
                    _over(
                        _path((*parts, i)),
                        "characters",
                        len(v),
                        max_str,
                        "max_string_length",
                        "send shorter text",
                    )


def _parse(raw: bytes) -> Any:
    """The JSON value of ``raw``; ``_NOT_JSON`` when it is not JSON (the route will say so)."""
    try:
        return orjson.loads(raw)
    except orjson.JSONDecodeError:
        pass  # NaN, 1e400, huge integers: the standard parser (the app's own) accepts them
    try:
        return json.loads(raw)
    except RecursionError:
        raise LimitExceededError(
            "the JSON body is nested too deeply to read",
            field="json_depth",
            value=None,
            remedy="flatten the request",
        ) from None
    except (ValueError, UnicodeDecodeError) as exc:
        if isinstance(exc, UnicodeDecodeError):
            raise InvalidInputError(
                "the request body is not UTF-8 text",
                field="body",
                value=None,
                remedy="send JSON encoded as UTF-8 (Content-Type: application/json)",
            ) from None
        if isinstance(exc, json.JSONDecodeError):
            return _NOT_JSON
        raise LimitExceededError(  # e.g. an integer of more than 4300 digits
            f"the JSON body holds a number Python will not read: {str(exc)[:120]}",
            field="number",
            value=None,
            remedy="send numbers as ordinary JSON numbers (at most a few hundred digits)",
        ) from None


_NOT_JSON = object()


def check_training_data(
    settings: Settings, kinds: Mapping[str, str], columns: Mapping[str, np.ndarray], n_obs: int
) -> None:
    """Rows of a fit and the distinct levels (count and length) of each categorical column."""
    _over(
        "data",
        "rows",
        n_obs,
        settings.max_fit_rows,
        "max_fit_rows",
        "fit on a sample, or split the data by period",
    )
    for name, kind in kinds.items():
        if kind != "categorical":
            continue
        levels = _distinct_text(columns[name])
        _over(
            f"data.columns.{name}",
            "distinct levels",
            len(levels),
            settings.max_levels,
            "max_levels",
            f"merge rare levels of {name} into fewer groups",
        )
        longest = max((len(v) for v in levels), default=0)
        _over(
            f"data.columns.{name}",
            "characters in a level",
            longest,
            settings.max_string_length,
            "max_string_length",
            "use shorter level names",
        )


def _distinct_text(values: Any) -> list[str]:
    """The distinct values of a column as text (one hash pass; no sort of the whole column)."""
    seq = values.tolist() if isinstance(values, np.ndarray) else list(values)
    distinct = dict.fromkeys(seq)
    if set(map(type, distinct)) <= {str}:
        return list(distinct)
    return list(dict.fromkeys(map(str, distinct)))


class LimitsMiddleware:
    """Refuses oversized bodies (413) and JSON over the structural limits (422) early."""

    def __init__(self, app: ASGIApp, settings: Settings) -> None:
        self.app = app
        self.settings = settings

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http" or scope["method"] not in _BODY_METHODS:
            await self.app(scope, receive, send)
            return
        content_type, length = b"", b""
        for k, v in scope["headers"]:
            k = k.lower()
            if k == b"content-type":
                content_type = v
            elif k == b"content-length":
                length = v
        multipart = content_type.lower().startswith(b"multipart/")
        s = self.settings
        if multipart:
            what, limit, setting = "upload", s.max_upload_bytes, "max_upload_bytes"
            remedy = "upload a smaller file (a sample, or one period at a time)"
        else:
            what, limit, setting = "request body", s.max_body_bytes, "max_body_bytes"
            remedy = "send fewer records per request, or training data as a CSV/Parquet upload"
        try:
            declared = int(length or 0)
        except ValueError:
            declared = 0
        if declared > limit:
            await _answer(send, too_large(what, declared, limit, setting, remedy))
            return
        if multipart:
            await self.app(scope, _counting(receive, what, limit, setting, remedy), send)
            return
        try:
            raw = await _read_body(receive, what, limit, setting, remedy)
            if raw:
                parsed = _parse(raw)
                if parsed is not _NOT_JSON:
                    if may_exceed(raw, parsed, s):
                        check_json_body(parsed, s)
                    scope[JSON_SCOPE_KEY] = parsed
        except RiskfitError as exc:
            await _answer(send, exc)
            return
        await self.app(scope, _replay(raw, receive), send)


def _counting(receive: Receive, what: str, limit: int, setting: str, remedy: str) -> Receive:
    """``receive`` that raises the 413 error once more than ``limit`` bytes have arrived."""
    seen = 0

    async def wrapped() -> Message:
        nonlocal seen
        message = await receive()
        if message["type"] == "http.request":
            seen += len(message.get("body", b""))
            if seen > limit:
                raise too_large(what, seen, limit, setting, remedy)
        return message

    return wrapped


async def _read_body(receive: Receive, what: str, limit: int, setting: str, remedy: str) -> bytes:
    counted = _counting(receive, what, limit, setting, remedy)
    chunks: list[bytes] = []
    while True:
        message = await counted()
        if message["type"] != "http.request":
            break  # client went away: the app sees an empty body
        chunks.append(message.get("body", b""))
        if not message.get("more_body", False):
            break
    return b"".join(chunks)


def _replay(raw: bytes, receive: Receive) -> Receive:
    """The buffered body once, then the client's own ``receive`` (to see a disconnect)."""
    sent = False

    async def replay() -> Message:
        nonlocal sent
        if not sent:
            sent = True
            return {"type": "http.request", "body": raw, "more_body": False}
        return await receive()

    return replay


async def _answer(send: Send, exc: RiskfitError) -> None:
    from service.api.errors import error_body, status_for
    from service.api.responses import JSONBytes

    body = error_body(
        exc.code,
        exc.message,
        field=exc.field,
        value=exc.value,
        remedy=exc.remedy,
        details=exc.details,
    )
    response = JSONBytes(body, status_code=status_for(exc))
    await response({"type": "http"}, _no_receive, send)


async def _no_receive() -> Message:
    return {"type": "http.disconnect"}
