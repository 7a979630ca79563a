"""A synchronous :class:`httpx.Client` wired straight into an ASGI app, lifespan included.

``riskfit serve --demo`` seeds the store before the server starts listening, and tests drive
the app without a socket; both want the same blocking ``httpx.Client`` the demo uses against
a live server. The app runs on a private event loop; each request is sent through
:class:`httpx.ASGITransport` on that loop and its body read in full.
"""

from __future__ import annotations

import asyncio
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

import httpx

from service.security import own_key_headers

__all__ = ["in_process_client"]


class _LoopTransport(httpx.BaseTransport):
    """Blocking transport: runs an async ASGI transport on one event loop."""

    def __init__(self, app: Any, loop: asyncio.AbstractEventLoop) -> None:
        self._asgi = httpx.ASGITransport(app=app, raise_app_exceptions=False)
        self._loop = loop

    def handle_request(self, request: httpx.Request) -> httpx.Response:
        async def send() -> httpx.Response:
            response = await self._asgi.handle_async_request(request)
            body = await response.aread()
            return httpx.Response(response.status_code, headers=response.headers, content=body)

        return self._loop.run_until_complete(send())


@contextmanager
def in_process_client(app: Any, base_url: str = "http://in-process") -> Iterator[httpx.Client]:
    """Enter ``app``'s lifespan (migrations, engine), yield a client, leave the lifespan."""
    loop = asyncio.new_event_loop()
    lifespan = app.router.lifespan_context(app)
    loop.run_until_complete(lifespan.__aenter__())
    try:
        transport = _LoopTransport(app, loop)
        headers = own_key_headers(app)  # a key of its own when the app checks keys
        with httpx.Client(
            transport=transport, base_url=base_url, timeout=120.0, headers=headers
        ) as client:
            yield client
    finally:
        loop.run_until_complete(lifespan.__aexit__(None, None, None))
        loop.close()
