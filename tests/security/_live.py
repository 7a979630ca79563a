"""A live uvicorn server on 127.0.0.1 (a free port) in a thread, for tests that need real
sockets: slow clients, proxy headers."""

from __future__ import annotations

import contextlib
import socket
import threading
import time
from collections.abc import Iterator
from typing import Any

import uvicorn

from service.app import create_app
from service.config import Settings


@contextlib.contextmanager
def live_server(settings: Settings, **uvicorn_options: Any) -> Iterator[int]:
    """uvicorn with ``uvicorn_options`` serving ``create_app(settings)``; yields the port."""
    sock = socket.socket(socket.AF_INET, socket.SOCK_STREAM)
    sock.setsockopt(socket.SOL_SOCKET, socket.SO_REUSEADDR, 1)
    sock.bind(("127.0.0.1", 0))
    port = sock.getsockname()[1]
    config = uvicorn.Config(
        create_app(settings), log_level="warning", lifespan="on", **uvicorn_options
    )
    server = uvicorn.Server(config)
    thread = threading.Thread(target=server.run, kwargs={"sockets": [sock]}, daemon=True)
    thread.start()
    deadline = time.monotonic() + 20
    while not server.started:
        assert time.monotonic() < deadline and thread.is_alive(), "server did not start"
        time.sleep(0.05)
    try:
        yield port
    finally:
        server.should_exit = True
        thread.join(10)
        sock.close()
