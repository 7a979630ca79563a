"""The ``Server-Timing`` header of a fit (W3C Server Timing, https://www.w3.org/TR/server-timing/:
``name;dur=<milliseconds>`` items, comma separated)."""

from __future__ import annotations

import json
import re

from tests.api._data import SPEC, fit_body, segments
from tests.api.conftest import ApiClient

STEPS = ["read", "validate", "encode", "fit", "inference", "summaries", "store", "answer"]


def _steps(header: str) -> dict[str, float]:
    items = [part.strip() for part in header.split(",")]
    matches = [re.fullmatch(r"([a-z]+);dur=(\d+\.\d)", item) for item in items]
    assert all(matches), header
    return {m.group(1): float(m.group(2)) for m in matches if m}


def test_a_fit_names_the_time_of_each_step(api: ApiClient) -> None:
    cols = segments(600, seed=5)
    r = api.post("/risk-models/timed/versions", json=fit_body(cols))
    assert r.status_code == 201, r.text
    steps = _steps(r.headers["server-timing"])
    assert list(steps) == STEPS
    assert all(v >= 0 for v in steps.values())
    csv = "\n".join(
        [",".join(cols), *(",".join(map(str, row)) for row in zip(*cols.values(), strict=True))]
    )
    r = api.post(
        "/risk-models/timed/versions",
        data={"spec": json.dumps(SPEC)},
        files={"data": ("segments.csv", csv.encode(), "text/csv")},
    )
    assert r.status_code == 201, r.text
    assert list(_steps(r.headers["server-timing"])) == STEPS


def test_the_header_stays_out_of_the_schema(api: ApiClient) -> None:
    schema = api.get("/openapi.json").json()
    post = schema["paths"]["/risk-models/{model}/versions"]["post"]
    assert "Server-Timing" not in json.dumps(post)
    assert [p["name"] for p in post.get("parameters", [])] == ["model"]
