"""The riskfit app for the HTTP benchmark, plus a no-op route to measure the HTTP floor.

``python -m uvicorn tests.benchmarks._http_app:create --factory --workers N`` builds the real
app from the ``RISKFIT_*`` environment (exactly what ``riskfit serve`` serves) and adds
``POST /bench/noop``, which reads the JSON body and answers a constant: same server, same
middleware, same JSON parsing, no domain work and no store. The route exists only in this
benchmark launcher, never in the product.
"""

from __future__ import annotations

from typing import Any

from fastapi import FastAPI, Request

from service.app import create_app

__all__ = ["NOOP_PATH", "create"]

NOOP_PATH = "/bench/noop"


async def noop(request: Request) -> dict[str, Any]:
    body = await request.json()
    return {"ok": True, "n_records": len(body.get("records", []))}


def create() -> FastAPI:
    app = create_app()
    app.add_api_route(NOOP_PATH, noop, methods=["POST"], include_in_schema=False)
    return app
