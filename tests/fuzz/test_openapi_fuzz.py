"""Property-based fuzzing of every operation of the OpenAPI document with schemathesis (4.x),
sent with an admin key (so requests reach the handlers) against the real app under uvicorn on
127.0.0.1, on a fresh SQLite file holding model ``water-mains`` (version 1, a few scores with
keys). Checks: no 5xx (``not_a_server_error``), responses match their documented schema,
status code and content type, and a method a path does not serve is 405 with ``Allow``.

CI size: ``RISKFIT_FUZZ_EXAMPLES`` examples per operation (default 10; about 2,000 requests in
all, with the explicit examples and schemathesis' coverage cases). The long on-demand run
(30,000+ requests, a report of the figures) is ``tests/fuzz/run_long.py``.
"""

from __future__ import annotations

import os
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import httpx
import pytest
import schemathesis
from hypothesis import HealthCheck, Phase, settings
from schemathesis.checks import not_a_server_error
from schemathesis.config import SchemathesisConfig
from schemathesis.specs.openapi.checks import (
    content_type_conformance,
    response_schema_conformance,
    status_code_conformance,
    unsupported_method,
)

from service.cli.keys import create_key_in_store
from service.config import Settings
from tests.api._data import NEW_RECORDS, fit_body
from tests.demo._live import live_server

MAX_EXAMPLES = int(os.environ.get("RISKFIT_FUZZ_EXAMPLES", "10"))
CHECKS = [
    not_a_server_error,
    response_schema_conformance,
    status_code_conformance,
    content_type_conformance,
    unsupported_method,  # a method a path does not serve: 405 with Allow
]
# Not checked: allow_header_conformance (Allow == the *documented* methods). Allow lists what
# the server serves, and GET /dashboard/sign-out is served but left out of the document.
_STATE: dict[str, Any] = {"requests": 0, "statuses": {}}


@pytest.fixture(scope="module")
def api_schema(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Any]:
    """The real app under uvicorn on 127.0.0.1 (starlette's TestClient warns, and warnings
    are errors here), an admin key, and model ``water-mains`` with version 1 and scores."""
    db = Path(tmp_path_factory.mktemp("fuzz")) / "fuzz.db"
    key = create_key_in_store(f"sqlite:///{db}", role="admin", name="fuzz").key
    headers = _STATE["headers"] = {"Authorization": f"Bearer {key}"}
    with live_server(Settings(database_url=f"sqlite:///{db}")) as url:
        base = f"{url}/risk-models/water-mains"
        r = httpx.post(f"{base}/versions", json=fit_body(), headers=headers, timeout=60)
        assert r.status_code == 201, r.text
        records = [{**rec, "key": f"k{i}"} for i, rec in enumerate(NEW_RECORDS)]
        r = httpx.post(f"{base}/scores", json={"records": records}, headers=headers, timeout=60)
        assert r.status_code == 200, r.text
        # the path parameter `model` is pinned so requests reach the handlers; bad model
        # names are the bad-input catalogue's (tests/security)
        config = SchemathesisConfig.from_dict({"parameters": {"model": "water-mains"}})
        yield schemathesis.openapi.from_url(f"{url}/openapi.json", config=config)
    # the figures, shown with `pytest -s`
    print(f"\nfuzz: {_STATE['requests']} requests, statuses {sorted(_STATE['statuses'].items())}")


schema = schemathesis.pytest.from_fixture("api_schema")


@pytest.mark.slow
@schema.parametrize()
@settings(
    max_examples=MAX_EXAMPLES,
    deadline=None,
    suppress_health_check=list(HealthCheck),
    phases=[Phase.explicit, Phase.generate],
    database=None,
)
def test_no_server_error_and_responses_match_the_schema(case: Any) -> None:
    response = case.call_and_validate(headers=_STATE["headers"], checks=CHECKS, timeout=120)
    _STATE["requests"] += 1
    statuses = _STATE["statuses"]
    statuses[response.status_code] = statuses.get(response.status_code, 0) + 1
