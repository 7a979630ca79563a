"""Bounded concurrent load against one live server, on SQLite (WAL) and PostgreSQL.

For ``RISKFIT_LOAD_SECONDS`` (default 20 s, at most 300 s; at most ``MAX_SCORE_REQUESTS``
score requests) 16 asyncio scorers send single-record and 5-record score requests, one
ingester posts an outcome (drawn from the returned probability) for every returned score_id,
and one writer fits a second version, runs a refit once enough outcomes are in (when the
refits route exists) and flips the champion between versions. Afterwards the store is read
directly: zero failed requests, every returned score_id is logged exactly once, score rows
equal the scores returned, outcome rows equal the outcomes acknowledged, and the store passes
its consistency checks. The figures are printed (run with ``-s`` to see them).
"""

from __future__ import annotations

import asyncio
import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import httpx
import numpy as np
import pytest
from sqlalchemy.engine import Engine

from models_store.orm import Outcome, Score
from tests.api._data import fit_body, segments
from tests.reliability._checks import outcome_map, score_ids, store_problems, table_count
from tests.reliability._load import hammer, load_seconds
from tests.reliability._server import ServerProcess
from tests.reliability._workload import fit_small, records, routes

pytestmark = pytest.mark.slow

SCORERS = 16
MAX_SCORE_REQUESTS = 200_000
OUTCOME_BATCH = 50
REFIT_AFTER_OUTCOMES = 1000
#: the refit window is small in a short run: gate on fewer events than the default 10
REFIT_BODY = {"method": "auto", "promote": "if-better", "gates": {"min_events": 5}}
FLIP_EVERY_S = 0.5


@dataclass
class Ledger:
    """What the clients were told: returned scores and acknowledged outcomes."""

    scored: list[tuple[str, float]] = field(default_factory=list)
    acked: dict[str, int] = field(default_factory=dict)
    failures: list[str] = field(default_factory=list)
    writes: list[str] = field(default_factory=list)


async def _ingest(client: httpx.AsyncClient, ledger: Ledger, deadline: float) -> None:
    rng = np.random.default_rng(17)
    sent = 0
    while time.perf_counter() < deadline:
        batch = ledger.scored[sent : sent + OUTCOME_BATCH]
        if not batch:
            await asyncio.sleep(0.01)
            continue
        sent += len(batch)
        items = [{"score_id": s, "outcome": int(rng.uniform() < p)} for s, p in batch]
        response = await client.post("/risk-models/pipes/outcomes", json={"outcomes": items})
        if response.status_code != 200:
            ledger.failures.append(f"outcomes {response.status_code}: {response.text[:300]}")
            continue
        body = response.json()
        accepted = body.get("accepted", items)
        assert len(accepted) == len(items), body
        ledger.acked.update({o["score_id"]: o["outcome"] for o in items})


async def _write(
    client: httpx.AsyncClient, ledger: Ledger, deadline: float, can_refit: bool
) -> None:
    def ok(what: str, response: httpx.Response) -> None:
        if response.is_success:
            ledger.writes.append(what)
        else:
            ledger.failures.append(f"{what} {response.status_code}: {response.text[:300]}")

    ok("fit", await client.post("/risk-models/pipes/versions", json=fit_body(segments(2000, 9))))
    refitted = not can_refit
    version = 1
    while time.perf_counter() < deadline:
        if not refitted and len(ledger.acked) >= REFIT_AFTER_OUTCOMES:
            refitted = True
            refit = await client.post("/risk-models/pipes/refits", json=REFIT_BODY, timeout=120)
            ok("refit", refit)
            continue
        n_versions = (await client.get("/risk-models/pipes/versions")).json()["count"]
        version = version % n_versions + 1
        change = {"version": version, "reason": "load test: champion flip"}
        ok("champion", await client.put("/risk-models/pipes/champion", json=change))
        await asyncio.sleep(FLIP_EVERY_S)


async def _scenario(base_url: str, seconds: float, can_ingest: bool, can_refit: bool) -> Any:
    ledger = Ledger()
    pool = records(2000, seed=21)

    async def score(client: httpx.AsyncClient, w: int, i: int) -> httpx.Response:
        size = 1 if i % 2 == 0 else 5
        start = (w * 97 + i * size) % (len(pool) - size)
        response = await client.post(
            "/risk-models/pipes/scores", json={"records": pool[start : start + size]}
        )
        if response.is_success:
            ledger.scored += [(s["score_id"], s["probability"]) for s in response.json()["scores"]]
        return response

    deadline = time.perf_counter() + seconds
    async with httpx.AsyncClient(base_url=base_url, timeout=60.0) as client:
        side = [_write(client, ledger, deadline, can_refit)]
        if can_ingest:
            side.append(_ingest(client, ledger, deadline))
        load, *_ = await asyncio.gather(
            hammer(
                base_url,
                score,
                concurrency=SCORERS,
                seconds=seconds,
                max_requests=MAX_SCORE_REQUESTS,
            ),
            *side,
        )
    return load, ledger


@pytest.mark.parametrize("_", ["load"])  # one id per backend in the report
def test_concurrent_scoring_ingestion_and_writes_reconcile(
    _: str,
    database_url: str,
    servers: Callable[..., ServerProcess],
    engine_for: Callable[[str], Engine],
) -> None:
    server = servers(database_url, name="load")
    with httpx.Client(base_url=server.base_url, timeout=60.0) as client:
        fit_small(client, "pipes")
        paths = routes(client)
    can_ingest = "/risk-models/{model}/outcomes" in paths
    can_refit = "/risk-models/{model}/refits" in paths
    seconds = load_seconds(20.0)
    load, ledger = asyncio.run(_scenario(server.base_url, seconds, can_ingest, can_refit))

    engine = engine_for(database_url)
    returned = [sid for sid, _p in ledger.scored]
    logged = score_ids(engine)
    stored, rows_per_score = outcome_map(engine)
    lost_scores = len(set(returned) - logged)
    lost_outcomes = sum(stored.get(s) != v for s, v in ledger.acked.items())
    backend = database_url.split(":", 1)[0]
    print(
        f"\n[{backend}] {seconds:.0f} s: {load.requests} score requests "
        f"({load.throughput:.0f}/s, p50 {load.percentile_ms(50):.1f} ms, "
        f"p99 {load.percentile_ms(99):.1f} ms), {len(returned)} scores returned, "
        f"{len(ledger.acked)} outcomes acknowledged, writes {sorted(set(ledger.writes))} "
        f"x{len(ledger.writes)}, errors {len(load.failures) + len(ledger.failures)}, "
        f"lost scores {lost_scores}, lost outcomes {lost_outcomes}"
        + ("" if can_ingest else " (no outcomes route yet)")
        + ("" if can_refit else " (no refits route yet)")
    )
    for failure in sorted(set(load.failures + ledger.failures))[:5]:
        print("  failure:", failure)
    assert load.failures == [] and ledger.failures == [], (load.failures + ledger.failures)[:5]
    assert load.requests > 0 and len(returned) > 0
    assert len(set(returned)) == len(returned), "a score_id was returned twice"
    assert lost_scores == 0
    assert table_count(engine, Score) == len(returned)
    assert lost_outcomes == 0
    assert table_count(engine, Outcome) == len(ledger.acked) == len(stored)
    assert not rows_per_score or max(rows_per_score.values()) == 1
    assert "fit" in ledger.writes and "champion" in ledger.writes
    assert not can_refit or "refit" in ledger.writes
    assert store_problems(engine) == []
