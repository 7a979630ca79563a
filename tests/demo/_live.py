"""The real app under uvicorn on 127.0.0.1 in a background thread (for command-line paths)."""

from __future__ import annotations

import socket
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager

import uvicorn

from service.app import create_app
from service.config import Settings


def free_port() -> int:
    """A port nothing listens on right now (the OS picks it)."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port: int = s.getsockname()[1]
        return port


@contextmanager
def live_server(settings: Settings, *, start_timeout: float = 30.0) -> Iterator[str]:
    """Serve an app built from ``settings``; yields its base URL; stops the server on exit."""
    port = free_port()
    app = create_app(settings)
    server = uvicorn.Server(uvicorn.Config(app, host="127.0.0.1", port=port, log_level="error"))
    thread = threading.Thread(target=server.run, daemon=True)
    thread.start()
    deadline = time.monotonic() + start_timeout
    try:
        while not server.started:
            if time.monotonic() > deadline or not thread.is_alive():
                raise RuntimeError(f"uvicorn did not start on 127.0.0.1:{port}")
            time.sleep(0.05)
        yield f"http://127.0.0.1:{port}"
    finally:
        server.should_exit = True
        thread.join(timeout=10)
