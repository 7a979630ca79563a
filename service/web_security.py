"""Two pure-ASGI middlewares of web hygiene (no per-request task, no body buffering).

:class:`SecurityHeadersMiddleware` adds response headers by path prefix only, so the JSON
scoring path pays one string comparison and nothing else:

* ``/dashboard`` (HTML pages, their errors, the sign-in form): a Content-Security-Policy
  (:data:`DASHBOARD_CSP`: no script at all, styles from the page's own stylesheet and the
  ``style`` attributes matplotlib writes into inline SVG, images only from itself or
  ``data:``, forms post only to this origin, no framing), ``X-Frame-Options: DENY``,
  ``X-Content-Type-Options: nosniff``, ``Referrer-Policy: same-origin`` and, except for the
  stylesheet, ``Cache-Control: no-store`` (signed-in pages must not stay in shared caches or
  the back-forward history of a signed-out browser);
* ``/api-keys`` (answers that carry a new key's secret): ``Cache-Control: no-store``,
  ``nosniff``;
* ``/docs``, ``/redoc``: no framing, ``nosniff`` (the API docs page loads its own script).

:class:`BodyTimeoutMiddleware` bounds the wait for each piece of a request body
(``body_timeout_seconds``): a client that sends headers and then stalls gets 408
(:class:`~service.errors.RequestTimeoutError`, via the usual error body) with
``Connection: close``, instead of holding a connection and a worker slot open indefinitely.
The same wait between successive reads is what reverse proxies call a client body timeout
(e.g. nginx ``client_body_timeout``); uvicorn itself has none.
"""

from __future__ import annotations

import asyncio
from typing import Any

from starlette.types import ASGIApp, Message, Receive, Scope, Send

from service.errors import RequestTimeoutError
from service.limits import _answer  # the one error-body writer of the middlewares

__all__ = ["DASHBOARD_CSP", "BodyTimeoutMiddleware", "SecurityHeadersMiddleware"]

DASHBOARD_CSP = (
    "default-src 'none'; script-src 'none'; style-src 'self' 'unsafe-inline'; "
    "img-src 'self' data:; form-action 'self'; frame-ancestors 'none'; base-uri 'none'"
)
_NOSNIFF = (b"x-content-type-options", b"nosniff")
_NO_STORE = (b"cache-control", b"no-store")
_NO_FRAMES = (b"x-frame-options", b"DENY")
_DASHBOARD = (
    (b"content-security-policy", DASHBOARD_CSP.encode()),
    _NO_FRAMES,
    _NOSNIFF,
    (b"referrer-policy", b"same-origin"),
)
_STYLESHEET = "/dashboard/static/"
_BODY_METHODS = frozenset({"POST", "PUT", "PATCH", "DELETE"})


def _headers_for(path: str) -> tuple[tuple[bytes, bytes], ...] | None:
    if path.startswith("/dashboard"):
        if path.startswith(_STYLESHEET):
            return _DASHBOARD
        return (*_DASHBOARD, _NO_STORE)
    if path.startswith("/api-keys"):
        return (_NO_STORE, _NOSNIFF)
    if path.startswith(("/docs", "/redoc")):
        return (_NO_FRAMES, _NOSNIFF)
    return None


class SecurityHeadersMiddleware:
    """Adds the headers of :func:`_headers_for` (those the app did not set itself)."""

    def __init__(self, app: ASGIApp) -> None:
        self.app = app

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        extra = _headers_for(scope["path"]) if scope["type"] == "http" else None
        if extra is None:
            await self.app(scope, receive, send)
            return

        async def send_with_headers(message: Message) -> None:
            if message["type"] == "http.response.start":
                headers = list(message.get("headers", ()))
                present = {k.lower() for k, _ in headers}
                headers.extend(h for h in extra if h[0] not in present)
                message = {**message, "headers": headers}
            await send(message)

        await self.app(scope, receive, send_with_headers)


class _Watchdog:
    """Cancels request tasks that wait for a body piece past their deadline.

    A receive in progress costs a dict entry (no timer per call: an ``asyncio.timeout`` per
    ``receive`` cost more than the rest of the middleware). One timer callback per event loop
    looks every ``period`` seconds while anything waits, and is not renewed once nothing does.
    """

    def __init__(self, timeout: float) -> None:
        self.timeout = timeout
        self.period = min(1.0, timeout / 4)
        self.waiting: dict[object, tuple[float, asyncio.Task[Any]]] = {}
        self.expired: set[object] = set()
        self._ticking: asyncio.AbstractEventLoop | None = None

    def watch(self, key: object, task: asyncio.Task[Any], loop: asyncio.AbstractEventLoop) -> None:
        self.waiting[key] = (loop.time() + self.timeout, task)
        if self._ticking is not loop:
            self._ticking = loop
            loop.call_later(self.period, self._tick, loop)

    def _tick(self, loop: asyncio.AbstractEventLoop) -> None:
        now = loop.time()
        mine = 0
        for key, (deadline, task) in list(self.waiting.items()):
            if task.get_loop() is not loop:
                continue
            mine += 1
            if now >= deadline:
                self.waiting.pop(key, None)
                self.expired.add(key)
                task.cancel()
        if mine and self._ticking is loop:
            loop.call_later(self.period, self._tick, loop)
        elif self._ticking is loop:
            self._ticking = None


class BodyTimeoutMiddleware:
    """408 and ``Connection: close`` when the next piece of a body takes over ``timeout`` s.

    Whatever the app answers to the body it never got (the limits middleware's error, or the
    400 FastAPI makes of a broken form) is dropped and replaced by the 408.
    """

    def __init__(self, app: ASGIApp, timeout: float) -> None:
        self.app = app
        self.timeout = timeout
        self.watchdog = _Watchdog(timeout)

    async def __call__(self, scope: Scope, receive: Receive, send: Send) -> None:
        if scope["type"] != "http" or scope["method"] not in _BODY_METHODS:
            await self.app(scope, receive, send)
            return
        watchdog = self.watchdog
        body_done = False
        started = False
        stalled: RequestTimeoutError | None = None

        async def timed_receive() -> Message:
            nonlocal body_done, stalled
            if body_done:
                return await receive()  # waiting for a disconnect: no deadline
            key = object()
            task = asyncio.current_task()
            if task is not None:
                watchdog.watch(key, task, asyncio.get_running_loop())
            try:
                message = await receive()
            except asyncio.CancelledError:
                if key not in watchdog.expired or task is None:
                    raise
                watchdog.expired.discard(key)
                task.uncancel()
                error = _stalled(watchdog.timeout)
                if not started:
                    stalled = error
                raise error from None
            finally:
                watchdog.waiting.pop(key, None)
            if message["type"] != "http.request" or not message.get("more_body", False):
                body_done = True
            return message

        async def guarded_send(message: Message) -> None:
            nonlocal started
            if stalled is not None:
                return  # the app's answer to a body it never got: the 408 below replaces it
            if message["type"] == "http.response.start":
                started = True
            await send(message)

        try:
            await self.app(scope, timed_receive, guarded_send)
        except RequestTimeoutError:
            if stalled is None:
                raise
        if stalled is not None:
            await _answer(_closing(send), stalled)


def _stalled(timeout: float) -> RequestTimeoutError:
    return RequestTimeoutError(
        f"the request body stalled: nothing arrived for {timeout:g} seconds",
        field="body",
        value=None,
        remedy="send the whole body without pausing (an operator may raise "
        "RISKFIT_BODY_TIMEOUT_SECONDS for slow links)",
        details={"timeout_seconds": timeout},
    )


def _closing(send: Send) -> Send:
    """``send`` that marks the answer ``Connection: close`` (the rest of the body is unread)."""

    async def closing_send(message: Message) -> None:
        if message["type"] == "http.response.start":
            message = {
                **message,
                "headers": [*message.get("headers", ()), (b"connection", b"close")],
            }
        await send(message)

    return closing_send
