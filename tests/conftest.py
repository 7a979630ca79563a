"""Fixtures shared by every suite."""

from __future__ import annotations

import os
import shutil

import pytest

# The apps the tests start leave the garbage collector alone: its tuning for a server starts
# with a full collection, about 0.2 s in a process holding every test dependency, for each of
# hundreds of apps (tests/api/test_server_heap.py turns it on for itself).
os.environ.setdefault("RISKFIT_TUNE_GC", "false")


def pytest_report_header(config: pytest.Config) -> list[str]:
    pg = os.environ.get("RISKFIT_TEST_POSTGRES_URL")
    chromium = shutil.which("chromium") or shutil.which("chromium-browser")
    return [
        "riskfit: PostgreSQL tests "
        + (f"ON ({pg})" if pg else "SKIPPED (set RISKFIT_TEST_POSTGRES_URL to run them)"),
        "riskfit: browser tests "
        + (f"ON ({chromium})" if chromium else "SKIPPED (install Debian's chromium to run them)"),
    ]


@pytest.fixture(scope="session")
def postgres_url() -> str:
    """URL of a real PostgreSQL server for the store and API suites, or skip saying why."""
    url = os.environ.get("RISKFIT_TEST_POSTGRES_URL")
    if not url:
        pytest.skip("PostgreSQL tests skipped: RISKFIT_TEST_POSTGRES_URL is not set")
    return url
