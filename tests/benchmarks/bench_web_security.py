"""Benchmark: what the web-security middlewares add to one request (run on demand).

    python3 tests/benchmarks/bench_web_security.py

A no-op ASGI app (reads the one-piece body, answers 200) is called directly, bare and wrapped
in :class:`~service.web_security.BodyTimeoutMiddleware` and
:class:`~service.web_security.SecurityHeadersMiddleware` as ``create_app`` stacks them, for a
scoring request (``POST /risk-models/m/scores``: the timeout wraps ``receive``, no headers are
added) and a dashboard page (``GET /dashboard``: headers added). Best of ``--repeat`` runs of
``--n`` requests; microseconds per request and the difference from the bare app.
"""

from __future__ import annotations

import argparse
import asyncio
import time
from typing import Any

from service.web_security import BodyTimeoutMiddleware, SecurityHeadersMiddleware

BODY = b'{"records": [{"age_years": 85}]}'


async def noop(scope: Any, receive: Any, send: Any) -> None:
    if scope["method"] == "POST":
        await receive()
    await send({"type": "http.response.start", "status": 200, "headers": []})
    await send({"type": "http.response.body", "body": b"{}"})


async def _receive() -> dict[str, Any]:
    return {"type": "http.request", "body": BODY, "more_body": False}


async def _send(message: dict[str, Any]) -> None:
    return None


async def _run(app: Any, method: str, path: str, n: int) -> float:
    scope = {"type": "http", "method": method, "path": path, "headers": []}
    start = time.perf_counter()
    for _ in range(n):
        await app(dict(scope), _receive, _send)
    return (time.perf_counter() - start) / n * 1e6


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--n", type=int, default=50_000)
    parser.add_argument("--repeat", type=int, default=5)
    args = parser.parse_args()
    wrapped = BodyTimeoutMiddleware(SecurityHeadersMiddleware(noop), timeout=30.0)
    for method, path in (("POST", "/risk-models/m/scores"), ("GET", "/dashboard")):
        bare = min(asyncio.run(_run(noop, method, path, args.n)) for _ in range(args.repeat))
        full = min(asyncio.run(_run(wrapped, method, path, args.n)) for _ in range(args.repeat))
        print(
            f"{method:4} {path:24} bare {bare:6.2f} us/request, with the middlewares "
            f"{full:6.2f} us (+{full - bare:.2f} us)"
        )


if __name__ == "__main__":
    main()
