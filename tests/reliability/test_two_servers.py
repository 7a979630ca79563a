"""Two ``riskfit serve`` processes against one PostgreSQL database (the multi-process setup).

* Score ids never collide: both processes score concurrently (bounded: a few seconds, a
  request budget), every returned id is distinct and logged exactly once, and the score rows
  equal the scores returned through both.
* Version numbers are shared: a version fitted through the second process gets number 2.
* A champion change made through one process is seen by the other. The service reads the
  champion number from the store on every score request and caches only immutable decoded
  versions (service/scoring.py), so the first score request sent to the other process after
  the change was acknowledged must already use the new champion; the delay from the
  acknowledgement to that answer is measured and printed.
"""

from __future__ import annotations

import asyncio
import statistics
import time
from collections.abc import Awaitable, Callable

import httpx
import pytest
from sqlalchemy.engine import Engine

from models_store.orm import Score
from tests.reliability._checks import score_ids, store_problems, table_count
from tests.reliability._load import hammer
from tests.reliability._server import ServerProcess
from tests.reliability._workload import fit_small, records

pytestmark = [pytest.mark.postgres, pytest.mark.slow]

FLIPS = 10
LOAD_SECONDS = 4.0


async def _score_through(urls: list[str], pool: list[dict[str, object]]) -> list[list[str]]:
    ids: list[list[str]] = [[] for _ in urls]

    def scorer(k: int) -> Callable[[httpx.AsyncClient, int, int], Awaitable[httpx.Response]]:
        async def score(client: httpx.AsyncClient, w: int, i: int) -> httpx.Response:
            start = (w * 31 + i * 3) % (len(pool) - 3)
            response = await client.post(
                "/risk-models/pipes/scores", json={"records": pool[start : start + 3]}
            )
            if response.is_success:
                ids[k] += [s["score_id"] for s in response.json()["scores"]]
            return response

        return score

    results = await asyncio.gather(
        *(
            hammer(url, scorer(k), concurrency=8, seconds=LOAD_SECONDS, max_requests=20_000)
            for k, url in enumerate(urls)
        )
    )
    for result in results:
        assert result.failures == [], result.failures[:3]
    return ids


def test_two_processes_share_ids_versions_and_champion(
    postgres_database_url: str,
    servers: Callable[..., ServerProcess],
    engine_for: Callable[[str], Engine],
) -> None:
    a = servers(postgres_database_url, name="a")
    b = servers(postgres_database_url, name="b")
    with (
        httpx.Client(base_url=a.base_url, timeout=60.0) as ca,
        httpx.Client(base_url=b.base_url, timeout=60.0) as cb,
    ):
        assert fit_small(ca, "pipes")["number"] == 1
        assert fit_small(cb, "pipes", seed=8)["number"] == 2  # numbering is the store's

        ids = asyncio.run(_score_through([a.base_url, b.base_url], records(500, seed=3)))
        returned = ids[0] + ids[1]
        engine = engine_for(postgres_database_url)
        assert len(ids[0]) > 0 and len(ids[1]) > 0
        assert len(set(returned)) == len(returned), "two processes returned the same score id"
        assert set(returned) <= score_ids(engine)
        assert table_count(engine, Score) == len(returned)

        one = {"records": records(1, seed=4)}
        delays: list[float] = []
        for flip in range(FLIPS):
            target = 2 if flip % 2 == 0 else 1
            writer, reader = (ca, cb) if flip % 2 == 0 else (cb, ca)
            change = {"version": target, "reason": f"propagation check {flip}"}
            put = writer.put("/risk-models/pipes/champion", json=change)
            assert put.status_code == 200, put.text
            acked = time.perf_counter()
            seen = reader.post("/risk-models/pipes/scores", json=one)
            assert seen.status_code == 200, seen.text
            delays.append(time.perf_counter() - acked)
            assert seen.json()["version"] == target, "the other process served a stale champion"
            assert reader.get("/risk-models/pipes/champion").json()["version"] == target
    print(
        f"\ntwo processes on PostgreSQL: {len(returned)} scores ({len(ids[0])} + {len(ids[1])}), "
        f"0 id collisions; champion change seen by the other process on its first request, "
        f"delay median {statistics.median(delays) * 1000:.1f} ms, "
        f"max {max(delays) * 1000:.1f} ms over {FLIPS} changes"
    )
    assert store_problems(engine) == []
