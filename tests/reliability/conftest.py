"""Reliability fixtures: a fresh database per test on SQLite and PostgreSQL, live servers.

* ``database_url`` - the API suite's fixture (tests/api/conftest.py): an empty SQLite file or
  a fresh PostgreSQL database (tests/store/dbfixtures.py), once per backend; the PostgreSQL
  run skips, saying so, unless RISKFIT_TEST_POSTGRES_URL is set.
* ``postgres_database_url`` - the PostgreSQL case alone (multi-process tests).
* ``servers`` - ``servers(url, name=..., env=..., command=...)`` returns a started
  :class:`ServerProcess` (``riskfit serve`` on 127.0.0.1, or ``command``); every one is
  stopped at teardown.
* ``engine_for`` - ``engine_for(url)`` returns a store engine disposed at teardown.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Mapping
from pathlib import Path

import pytest
from sqlalchemy.engine import Engine

from models_store import make_engine
from tests.api.conftest import database_url
from tests.reliability._server import ServerProcess
from tests.store.dbfixtures import fresh_postgres_url

__all__ = ["database_url"]

ServerFactory = Callable[..., ServerProcess]


@pytest.fixture
def postgres_database_url(postgres_url: str) -> Iterator[str]:
    with fresh_postgres_url(postgres_url) as url:
        yield url


@pytest.fixture
def servers(tmp_path: Path) -> Iterator[ServerFactory]:
    started: list[ServerProcess] = []

    def start(
        url: str,
        *,
        name: str = "server",
        env: Mapping[str, str] | None = None,
        command: list[str] | None = None,
    ) -> ServerProcess:
        server = ServerProcess(url, tmp_path, env=env, name=name, command=command)
        started.append(server)
        return server.start()

    yield start
    for server in started:
        server.stop()


@pytest.fixture
def engine_for() -> Iterator[Callable[[str], Engine]]:
    engines: list[Engine] = []

    def make(url: str) -> Engine:
        engines.append(make_engine(url))
        return engines[-1]

    yield make
    for engine in engines:
        engine.dispose()
