"""Fixtures of the deployment-file checks."""

from __future__ import annotations

from collections.abc import Iterator
from pathlib import Path

import httpx
import pytest

from service.app import create_app
from service.config import Settings
from service.demo.inprocess import in_process_client


@pytest.fixture(scope="module")
def app_client(tmp_path_factory: pytest.TempPathFactory) -> Iterator[httpx.Client]:
    """The real app (start-up applies the migrations) on a fresh SQLite file."""
    db = Path(tmp_path_factory.mktemp("deploy")) / "riskfit.db"
    with in_process_client(create_app(Settings(database_url=f"sqlite:///{db}"))) as client:
        yield client


@pytest.fixture(scope="module")
def get_routes(app_client: httpx.Client) -> set[str]:
    """Paths the app's OpenAPI document lists with a GET operation."""
    paths = app_client.get("/openapi.json").json()["paths"]
    return {path for path, operations in paths.items() if "get" in operations}
