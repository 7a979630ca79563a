"""An app per test on a fresh database, driven through httpx's ASGI transport.

``api`` is a synchronous facade over ``httpx.AsyncClient(transport=ASGITransport(app))``
running on a private event loop, with the app's lifespan (migrations, engine) entered for the
test's duration: tests read like plain HTTP calls without an async test plugin.

``store_dump(api)`` returns every row of every table, so a test can assert that a refused
request left the store exactly as it was.
"""

from __future__ import annotations

import asyncio
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import pytest
from fastapi import FastAPI
from sqlalchemy import select

from models_store.orm import Base
from service.app import create_app
from service.config import Settings
from tests.store.dbfixtures import fresh_postgres_url, sqlite_url


class ApiClient:
    """Blocking HTTP calls against an in-process app (``get``, ``post``, ``put``, ``delete``)."""

    def __init__(self, app: FastAPI) -> None:
        self.app = app
        self._loop = asyncio.new_event_loop()
        self._client = httpx.AsyncClient(
            transport=httpx.ASGITransport(app=app, raise_app_exceptions=False),
            base_url="http://riskfit.test",
        )
        self._lifespan = app.router.lifespan_context(app)
        self._run(self._lifespan.__aenter__())

    def _run(self, coro: Any) -> Any:
        return self._loop.run_until_complete(coro)

    def request(self, method: str, url: str, **kwargs: Any) -> httpx.Response:
        response: httpx.Response = self._run(self._client.request(method, url, **kwargs))
        return response

    def get(self, url: str, **kwargs: Any) -> httpx.Response:
        return self.request("GET", url, **kwargs)

    def post(self, url: str, **kwargs: Any) -> httpx.Response:
        return self.request("POST", url, **kwargs)

    def put(self, url: str, **kwargs: Any) -> httpx.Response:
        return self.request("PUT", url, **kwargs)

    def delete(self, url: str, **kwargs: Any) -> httpx.Response:
        return self.request("DELETE", url, **kwargs)

    def close(self) -> None:
        self._run(self._client.aclose())
        self._run(self._lifespan.__aexit__(None, None, None))
        self._loop.close()


def store_dump(api: ApiClient) -> dict[str, list[tuple[Any, ...]]]:
    """Every row of every table, sorted, as plain tuples (for before/after comparisons)."""
    out: dict[str, list[tuple[Any, ...]]] = {}
    with api.app.state.engine.connect() as conn:
        for table in Base.metadata.sorted_tables:
            rows = conn.execute(select(table)).all()
            out[table.name] = sorted((tuple(map(repr, r)) for r in rows), key=repr)
    return out


def row_count(api: ApiClient, table: str) -> int:
    return len(store_dump(api)[table])


@pytest.fixture(params=["sqlite", pytest.param("postgres", marks=pytest.mark.postgres)])
def database_url(request: pytest.FixtureRequest, tmp_path: Path) -> Iterator[str]:
    """A fresh, empty database per test: an SQLite file, or a fresh PostgreSQL database."""
    if request.param == "sqlite":
        yield sqlite_url(tmp_path)
        return
    server_url: str = request.getfixturevalue("postgres_url")
    with fresh_postgres_url(server_url) as url:
        yield url


@pytest.fixture
def settings(database_url: str) -> Settings:
    return Settings(database_url=database_url, auth_required=False)  # access: tests/security


@pytest.fixture
def api(settings: Settings) -> Iterator[ApiClient]:
    client = ApiClient(create_app(settings))
    try:
        yield client
    finally:
        client.close()
