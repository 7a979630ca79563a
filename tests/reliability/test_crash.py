"""kill -9 of a live ``riskfit serve`` during a large fit and during outcome ingestion.

(a) A 300,000-row CSV fit is uploaded through multipart; once the body is fully sent the
    server is killed with SIGKILL after a short delay (three delays: while it parses, fits and
    stores). After each restart: no half-written version (see ``_checks.store_problems``:
    integrity check, schema at head, coef/term/cov sizes, champion names an existing version),
    the server answers, and a new fit gets the next number.
(b) Outcome batches for a few thousand logged scores are posted in a loop, every batch whose
    request returned 2xx being recorded; the server is killed mid-stream. After the restart
    every acknowledged outcome is stored exactly once with the value sent, at most the one
    batch in flight is stored unacknowledged, and resending everything (idempotent) makes the
    store hold each outcome exactly once.

kill -9 in the middle of a refit, and the next cron refit running within about one lease, is
tests/reliability/test_refit_crash.py.
"""

from __future__ import annotations

import threading
import time
import uuid
from collections.abc import Callable, Iterator
from dataclasses import dataclass, field
from typing import Any

import httpx
import pytest
from sqlalchemy.engine import Engine

from models_store.orm import ModelVersion, Outcome
from tests.reliability._checks import outcome_map, score_ids, store_problems, table_count
from tests.reliability._server import ServerProcess
from tests.reliability._workload import (
    SPEC,
    csv_bytes,
    fit_small,
    multipart_body,
    outcome_batches,
    records,
    score_all,
)

pytestmark = pytest.mark.slow

LARGE_FIT_ROWS = 300_000
KILL_DELAYS_S = (0.2, 0.9, 1.8)  # after the upload is sent: parsing, fitting, storing
CHUNK = 256 * 1024


def _chunks(body: bytes, sent: threading.Event) -> Iterator[bytes]:
    for start in range(0, len(body), CHUNK):
        yield body[start : start + CHUNK]
    sent.set()


def _post_large_fit(server: ServerProcess, body: bytes, boundary: str) -> dict[str, Any]:
    """Start the fit in a thread; returns a dict filled in with 'sent' and 'status'/'error'."""
    state: dict[str, Any] = {"sent": threading.Event()}

    def run() -> None:
        try:
            response = httpx.post(
                f"{server.base_url}/risk-models/pipes/versions",
                content=_chunks(body, state["sent"]),
                headers={"content-type": f"multipart/form-data; boundary={boundary}"},
                timeout=120.0,
            )
            state["status"] = response.status_code
        except httpx.TransportError as error:
            state["error"] = repr(error)

    state["thread"] = threading.Thread(target=run, daemon=True)
    state["thread"].start()
    return state


def test_kill_during_large_fit_leaves_no_half_written_version(
    database_url: str,
    servers: Callable[..., ServerProcess],
    engine_for: Callable[[str], Engine],
) -> None:
    server = servers(database_url, name="fit")
    with httpx.Client(base_url=server.base_url, timeout=60.0) as client:
        fit_small(client, "pipes")  # version 1 and the champion exist before the crashes
    boundary = uuid.uuid4().hex
    body = multipart_body(SPEC, csv_bytes(LARGE_FIT_ROWS, seed=11), boundary)
    engine = engine_for(database_url)
    interrupted = 0
    for delay in KILL_DELAYS_S:
        state = _post_large_fit(server, body, boundary)
        assert state["sent"].wait(60.0), "the upload did not finish"
        time.sleep(delay)
        server.kill()
        state["thread"].join(30.0)
        interrupted += "status" not in state
        assert state.get("status", 201) == 201, state
        server.start()  # restart on the same database: migrations run again at start-up
        assert store_problems(engine) == []
        assert httpx.get(f"{server.base_url}/readyz", timeout=10).status_code == 200
    print(
        f"\nlarge-fit crashes: {interrupted}/{len(KILL_DELAYS_S)} killed mid-request, "
        f"{table_count(engine, ModelVersion)} versions stored, all complete"
    )
    assert interrupted >= 1, "every fit finished before the kill: raise LARGE_FIT_ROWS"
    with httpx.Client(base_url=server.base_url, timeout=60.0) as client:
        answer = fit_small(client, "pipes", seed=8)
        assert answer["number"] == table_count(engine, ModelVersion)
        scored = client.post("/risk-models/pipes/scores", json={"records": records(3, seed=1)})
        assert scored.status_code == 200, scored.text
    assert store_problems(engine) == []


@dataclass
class Stream:
    """What a request stream cut by kill -9 was told: acknowledged bodies and their answers."""

    acked: list[tuple[Any, dict[str, Any]]] = field(default_factory=list)
    in_flight: list[Any] = field(default_factory=list)
    failures: list[str] = field(default_factory=list)


def stream_and_kill(server: ServerProcess, path: str, bodies: list[Any]) -> Stream:
    """POST ``bodies`` one after another; kill -9 the server once a third were acknowledged."""
    out = Stream()

    def send() -> None:
        with httpx.Client(base_url=server.base_url, timeout=30.0) as client:
            for body in bodies:
                out.in_flight[:] = [body]
                try:
                    response = client.post(path, json=body)
                except httpx.TransportError:
                    return  # the server died under us
                if not response.is_success:
                    out.failures.append(f"{response.status_code}: {response.text[:300]}")
                    return
                out.acked.append((body, response.json()))

    thread = threading.Thread(target=send, daemon=True)
    thread.start()
    deadline = time.monotonic() + 60.0
    while len(out.acked) < len(bodies) // 3 and time.monotonic() < deadline and thread.is_alive():
        time.sleep(0.002)
    server.kill()
    thread.join(30.0)
    assert out.failures == []
    assert 0 < len(out.acked) < len(bodies), "the kill missed the stream"
    return out


def test_kill_during_score_stream_keeps_every_returned_score_id(
    database_url: str,
    servers: Callable[..., ServerProcess],
    engine_for: Callable[[str], Engine],
) -> None:
    server = servers(database_url, name="scores")
    with httpx.Client(base_url=server.base_url, timeout=60.0) as client:
        fit_small(client, "pipes")
    pool = records(600, seed=5)
    bodies = [{"records": pool[i : i + 1 + i % 7]} for i in range(0, 540, 2)]
    cut = stream_and_kill(server, "/risk-models/pipes/scores", bodies)
    engine = engine_for(database_url)
    server.start()
    assert store_problems(engine) == []
    returned = [s["score_id"] for _body, answer in cut.acked for s in answer["scores"]]
    logged = score_ids(engine)
    lost = set(returned) - logged
    extra = len(logged) - len(returned)
    print(
        f"\nscore stream crash: {len(cut.acked)} requests ({len(returned)} score ids) "
        f"answered, {len(lost)} lost, {extra} logged from the request in flight"
    )
    assert lost == set()
    assert 0 <= extra <= len(cut.in_flight[0]["records"])


def test_kill_during_outcome_stream_keeps_every_acknowledged_outcome(
    database_url: str,
    servers: Callable[..., ServerProcess],
    engine_for: Callable[[str], Engine],
) -> None:
    server = servers(database_url, name="outcomes")
    with httpx.Client(base_url=server.base_url, timeout=60.0) as client:
        fit_small(client, "pipes")
        ids = score_all(client, "pipes", records(3000, seed=5))
    batches = [{"outcomes": b} for b in outcome_batches(ids, size=50, seed=6)]
    cut = stream_and_kill(server, "/risk-models/pipes/outcomes", batches)

    engine = engine_for(database_url)
    server.start()
    assert store_problems(engine) == []
    stored, rows_per_score = outcome_map(engine)
    sent = {o["score_id"]: o["outcome"] for body, _answer in cut.acked for o in body["outcomes"]}
    missing = [sid for sid in sent if stored.get(sid) != sent[sid]]
    unacked = set(stored) - set(sent)
    print(
        f"\noutcome stream crash: {len(cut.acked)} batches ({len(sent)} outcomes) acknowledged, "
        f"{len(missing)} lost, {len(unacked)} stored from the batch in flight"
    )
    assert missing == []
    assert max(rows_per_score.values()) == 1
    assert unacked <= {o["score_id"] for o in cut.in_flight[0]["outcomes"]}

    with httpx.Client(base_url=server.base_url, timeout=30.0) as client:
        for body in batches:  # resend everything: duplicates are answered, not stored twice
            response = client.post("/risk-models/pipes/outcomes", json=body)
            assert response.status_code == 200, response.text
    stored, rows_per_score = outcome_map(engine)
    assert table_count(engine, Outcome) == len(ids) == len(stored)
    assert max(rows_per_score.values()) == 1
