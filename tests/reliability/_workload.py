"""Seeded requests the reliability tests send: a small fit, score batches, outcome batches.

Data are the API suite's invented pipe segments (tests/api/_data.py): the outcome of each
scored record is drawn from the same known model, so outcome batches are realistic 0/1 data.
"""

from __future__ import annotations

import json
from collections.abc import Iterator
from typing import Any

import httpx
import numpy as np

from tests.api._data import SPEC, fit_body, rows_of, segments

__all__ = [
    "SPEC",
    "csv_bytes",
    "fit_small",
    "multipart_body",
    "outcome_batches",
    "records",
    "score_all",
]

FEATURES = [f["name"] for f in SPEC["features"]]


def records(n: int, seed: int) -> list[dict[str, Any]]:
    """``n`` seeded records with the features only (no outcome)."""
    cols = segments(n, seed=seed)
    return [{k: r[k] for k in FEATURES} for r in rows_of(cols)]


def fit_small(client: httpx.Client, model: str, n: int = 1500, seed: int = 7) -> dict[str, Any]:
    """Fit a small version through JSON columns; asserts 201."""
    response = client.post(f"/risk-models/{model}/versions", json=fit_body(segments(n, seed)))
    assert response.status_code == 201, response.text
    answer: dict[str, Any] = response.json()
    return answer


def score_all(
    client: httpx.Client, model: str, rows: list[dict[str, Any]], batch: int = 500
) -> list[str]:
    """Score ``rows`` in batches; returns the score ids in order (asserts 200 each time)."""
    ids: list[str] = []
    for start in range(0, len(rows), batch):
        response = client.post(
            f"/risk-models/{model}/scores", json={"records": rows[start : start + batch]}
        )
        assert response.status_code == 200, response.text
        ids += [s["score_id"] for s in response.json()["scores"]]
    return ids


def outcome_batches(score_ids: list[str], size: int, seed: int) -> Iterator[list[dict[str, Any]]]:
    """Consecutive outcome batches ``[{"score_id", "outcome"}]`` covering ``score_ids``."""
    rng = np.random.default_rng(seed)
    values = (rng.uniform(size=len(score_ids)) < 0.1).astype(int).tolist()
    for start in range(0, len(score_ids), size):
        yield [
            {"score_id": sid, "outcome": v}
            for sid, v in zip(
                score_ids[start : start + size], values[start : start + size], strict=True
            )
        ]


def csv_bytes(n: int, seed: int) -> bytes:
    """``n`` seeded training rows as CSV with a header row."""
    cols = segments(n, seed=seed)
    names = list(cols)
    lines = [",".join(names)]
    lines += [",".join(str(v) for v in row) for row in zip(*cols.values(), strict=True)]
    return ("\n".join(lines) + "\n").encode()


def multipart_body(spec: dict[str, Any], data: bytes, boundary: str) -> bytes:
    """A ``multipart/form-data`` fit body with parts ``spec`` (JSON) and ``data`` (CSV)."""
    b = boundary.encode()
    return b"".join(
        [
            b"--" + b + b'\r\nContent-Disposition: form-data; name="spec"\r\n'
            b"Content-Type: application/json\r\n\r\n" + json.dumps(spec).encode() + b"\r\n",
            b"--" + b + b'\r\nContent-Disposition: form-data; name="data"; filename="d.csv"\r\n'
            b"Content-Type: text/csv\r\n\r\n" + data + b"\r\n",
            b"--" + b + b"--\r\n",
        ]
    )


def routes(client: httpx.Client) -> set[str]:
    """Paths the server's OpenAPI document lists (to use routes other teams add as they land)."""
    paths: dict[str, Any] = client.get("/openapi.json").json()["paths"]
    return set(paths)
