"""Benchmark: scoring over HTTP end to end against a no-op route of the same server.

Run on demand (not collected by pytest):

    python3 tests/benchmarks/bench_http_scoring.py                      # SQLite, 1 worker
    python3 tests/benchmarks/bench_http_scoring.py --workers 2 --seconds 20
    RISKFIT_TEST_POSTGRES_URL=postgresql+psycopg://postgres@127.0.0.1:5432/test \\
        python3 tests/benchmarks/bench_http_scoring.py --db postgres

Starts ``uvicorn tests.benchmarks._http_app:create --workers N`` on 127.0.0.1 with a fresh
database (a temporary SQLite file, or a new PostgreSQL database that is dropped afterwards),
fits one model, then for ``--seconds`` each sends bounded asyncio httpx load from
``--concurrency`` connections:

* ``noop``   - ``POST /bench/noop`` with a one-record body (HTTP + JSON floor of this server);
* ``score``  - ``POST /risk-models/bench/scores`` with one record: probability, its Wald
  interval, and the durable score log (committed before the answer);
* ``batch``  - 10,000 records per request (``--batch-records``), 2 connections: records/s.

Prints throughput, p50/p99 latency and the score/no-op throughput ratio measured in the same
run. The client runs on the same machine (2 cores here), so absolute figures include its
own CPU use; the ratio is the figure to compare across changes.
"""

from __future__ import annotations

import argparse
import asyncio
import contextlib
import os
import sys
import tempfile
from collections.abc import Iterator
from pathlib import Path

import httpx

ROOT = Path(__file__).resolve().parents[2]
if str(ROOT) not in sys.path:  # run as a script: make ``tests`` importable
    sys.path.insert(0, str(ROOT))

from tests.benchmarks._http_app import NOOP_PATH  # noqa: E402
from tests.reliability._load import LoadResult, hammer  # noqa: E402
from tests.reliability._server import ServerProcess  # noqa: E402
from tests.reliability._workload import fit_small, records  # noqa: E402
from tests.store.dbfixtures import fresh_postgres_url  # noqa: E402

MODEL = "bench"
MAX_REQUESTS = 1_000_000


@contextlib.contextmanager
def database(kind: str, tmp: Path) -> Iterator[str]:
    if kind == "sqlite":
        yield f"sqlite:///{tmp / 'bench.db'}"
        return
    base = os.environ.get("RISKFIT_TEST_POSTGRES_URL")
    if not base:
        raise SystemExit("--db postgres needs RISKFIT_TEST_POSTGRES_URL (a server on 127.0.0.1)")
    with fresh_postgres_url(base) as url:
        yield url


def uvicorn_command(workers: int) -> list[str]:
    return [
        sys.executable, "-m", "uvicorn", "tests.benchmarks._http_app:create", "--factory",
        "--host", "127.0.0.1", "--port", "{port}", "--workers", str(workers),
        "--log-level", "warning", "--no-access-log",
    ]  # fmt: skip


def run(
    base_url: str, path: str, body: dict[str, object], concurrency: int, seconds: float
) -> LoadResult:
    async def send(client: httpx.AsyncClient, _w: int, _i: int) -> httpx.Response:
        return await client.post(path, json=body)

    result = asyncio.run(
        hammer(base_url, send, concurrency=concurrency, seconds=seconds, max_requests=MAX_REQUESTS)
    )
    if result.failures:
        raise SystemExit(f"{path}: {len(result.failures)} failures, e.g. {result.failures[0]}")
    return result


def main() -> int:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--db", choices=["sqlite", "postgres"], default="sqlite")
    parser.add_argument("--workers", type=int, default=1, help="uvicorn worker processes")
    parser.add_argument("--seconds", type=float, default=10.0, help="per measurement (max 120)")
    parser.add_argument("--concurrency", type=int, default=16)
    parser.add_argument("--batch-records", type=int, default=10_000)
    args = parser.parse_args()
    seconds = min(max(args.seconds, 1.0), 120.0)
    one = {"records": records(1, seed=1)}
    batch = {"records": records(args.batch_records, seed=2)}
    with tempfile.TemporaryDirectory() as tmp, database(args.db, Path(tmp)) as url:
        server = ServerProcess(
            url, Path(tmp), command=uvicorn_command(args.workers), name="bench"
        ).start()
        try:
            with httpx.Client(base_url=server.base_url, timeout=60.0) as client:
                fit_small(client, MODEL)
            score_path = f"/risk-models/{MODEL}/scores"
            run(server.base_url, score_path, one, args.concurrency, 1.0)  # warm caches and pools
            noop = run(server.base_url, NOOP_PATH, one, args.concurrency, seconds)
            score = run(server.base_url, score_path, one, args.concurrency, seconds)
            bulk = run(server.base_url, score_path, batch, 2, seconds)
        finally:
            server.stop()
    print(
        f"\nHTTP scoring on {args.db}, {args.workers} uvicorn worker(s), "
        f"{args.concurrency} connections, {seconds:.0f} s per row, client on the same host"
    )
    print(
        f"{'measure':<34}{'requests':>10}{'req/s':>10}{'p50 ms':>10}{'p99 ms':>10}{'records/s':>12}"
    )
    rows = [
        ("no-op (1-record body)", noop, 1),
        ("score 1 record (+CI, logged)", score, 1),
        (f"score {args.batch_records:,} records/request", bulk, args.batch_records),
    ]
    for name, r, n in rows:
        print(
            f"{name:<34}{r.requests:>10}{r.throughput:>10.1f}{r.percentile_ms(50):>10.1f}"
            f"{r.percentile_ms(99):>10.1f}{r.throughput * n:>12,.0f}"
        )
    print(f"ratio score/no-op throughput: {score.throughput / noop.throughput:.3f}")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
