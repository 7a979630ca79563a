"""Benchmark: scoring throughput, in process and over HTTP, against peers in the same run.

Run on demand (not collected by pytest):

    python3 tests/benchmarks/bench_scoring.py                 # both parts
    python3 tests/benchmarks/bench_scoring.py --part inproc   # domain operation only
    python3 tests/benchmarks/bench_scoring.py --part http --workers 2 --seconds 10 --rounds 2

``inproc``: :func:`service.scoring.score_batch` on 10,000 records (rows and columns layouts,
score log committed to SQLite) against its own parts measured in the same run: the engine's
``predict`` on the ready design matrix, and the plain ``sqlite3`` ``executemany`` of the same
log rows into a table of the same shape.

``http``: a live server on 127.0.0.1 (SQLite file, ``--workers N``): the product app exactly
as ``riskfit serve --no-auth`` builds it, launched through ``tests/benchmarks/_http_app.py``,
which adds one benchmark-only route, the no-op ``POST /bench/noop`` (reads the JSON body,
answers a constant). Batch: 10,000 records per request (rows and columns layouts), best of
``--repeat``; records/s end to end (request JSON sent, response JSON received in full, score
log committed; the client parses the answers after the clock stops).
Single record: 16 concurrent connections against ``POST /scores`` and two no-op peers of the
same server, ``GET /healthz`` (the target's reference) and ``POST /bench/noop`` with the same
one-record body, with Debian's ``wrk`` when installed (else a bounded httpx asyncio loop).
The three are measured in ``--rounds`` interleaved rounds (``--seconds`` per endpoint in all),
so a change in the machine's load hits all of them alike; the best round of each is reported
with the throughput ratio and p50/p99 latency. At the end the score log must hold every
score the server acknowledged (it may hold a few more: requests still in flight when the load
tool stopped were committed, but their answers were not counted).

Absolute figures depend on the machine and its load; read the ratios.
"""

from __future__ import annotations

import argparse
import asyncio
import os
import re
import shutil
import sqlite3
import subprocess
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import numpy as np
import orjson

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from tests.api._data import segments  # noqa: E402

N_BATCH = 10_000
MODEL = "bench"


def _batch_columns(n: int, seed: int) -> dict[str, list[Any]]:
    cols = segments(n, seed=seed)
    cols.pop("outcome")
    return cols


def _rows(cols: dict[str, list[Any]]) -> list[dict[str, Any]]:
    names = list(cols)
    return [dict(zip(names, vals, strict=True)) for vals in zip(*cols.values(), strict=True)]


def _best(fn: Any, repeat: int) -> float:
    best = np.inf
    for _ in range(repeat):
        t0 = time.perf_counter()
        fn()
        best = min(best, time.perf_counter() - t0)
    return float(best)


def _row(label: str, seconds: float, n: int, ref: float | None = None) -> None:
    ratio = f"{seconds / ref:8.2f}" if ref else "        "
    print(f"  {label:<44s} {seconds * 1e3:9.1f} ms {n / seconds:12,.0f} rec/s {ratio}")


# --- in process -------------------------------------------------------------------------------


def bench_inproc(repeat: int) -> None:
    from models_store.models import require_model
    from service.app import create_app
    from service.config import Settings
    from service.scoring import columns_input, new_score_ids, records_input, score_batch
    from service.stats.design import design_matrix
    from service.stats.predict import predict
    from tests.api._data import fit_body

    tmp = tempfile.mkdtemp(prefix="bench-scoring-")
    app = create_app(Settings(database_url=f"sqlite:///{tmp}/inproc.db", auth_required=False))
    from fastapi.testclient import TestClient

    cols = _batch_columns(N_BATCH, 3)
    rows = _rows(cols)
    with TestClient(app) as client:
        assert client.post(f"/risk-models/{MODEL}/versions", json=fit_body()).status_code == 201
        cache = app.state.version_cache

        def op(make: Any) -> None:
            with app.state.session_factory() as s:
                m = require_model(session=s, name=MODEL)
                score_batch(
                    session=s,
                    model=m,
                    data=make,
                    version=None,
                    confidence_level=0.95,
                    explain=False,
                    cache=cache,
                )

        op(lambda v: records_input(rows, v.inputs))
        with app.state.session_factory() as s:
            v = cache.get(s, require_model(session=s, name=MODEL), 1)
        X = design_matrix(v.encoding, {k: np.asarray(c, dtype=object) for k, c in cols.items()}).X
        t_rows = _best(lambda: op(lambda v: records_input(rows, v.inputs)), repeat)
        t_cols = _best(lambda: op(lambda v: columns_input(cols, v.inputs)), repeat)
        t_pred = _best(lambda: predict(X, v.coef, v.cov), repeat)
        t_sql = _best(lambda: _raw_sqlite(tmp, new_score_ids(N_BATCH)), repeat)
    print(f"in process, {N_BATCH:,} records per batch, best of {repeat}")
    print(f"  {'':<44s} {'time':>12s} {'throughput':>18s} {'x insert':>8s}")
    _row("predict() on the ready design matrix (peer)", t_pred, N_BATCH, t_sql)
    _row("sqlite3 executemany of the log rows (peer)", t_sql, N_BATCH, t_sql)
    _row("score_batch, rows layout, log committed", t_rows, N_BATCH, t_sql)
    _row("score_batch, columns layout, log committed", t_cols, N_BATCH, t_sql)


def _raw_sqlite(tmp: str, ids: list[str]) -> None:
    con = sqlite3.connect(f"{tmp}/raw.db", isolation_level=None)
    con.execute("PRAGMA journal_mode=WAL")
    con.execute("PRAGMA synchronous=FULL")
    con.execute(  # the score table's layout (models_store.orm.Score)
        "CREATE TABLE IF NOT EXISTS score (id VARCHAR(36) PRIMARY KEY, model_id INT,"
        " version_number INT, key VARCHAR(100), inputs JSON, eta FLOAT, se_eta FLOAT,"
        " probability FLOAT, created_at DATETIME) WITHOUT ROWID"
    )
    con.execute(
        "CREATE UNIQUE INDEX IF NOT EXISTS uq_score ON score (model_id, key) WHERE key IS NOT NULL"
    )
    con.execute("CREATE INDEX IF NOT EXISTS ix_score_at ON score (model_id, created_at)")
    inputs = '{"age_years":85.0,"diameter_mm":150,"material":"cast iron","soil":"high"}'
    at = "2026-01-01 00:00:00.000000"
    con.execute("BEGIN IMMEDIATE")
    con.executemany(
        "INSERT INTO score VALUES (?,?,?,?,?,?,?,?,?)",
        [(i, 1, 1, None, inputs, 0.1, 0.2, 0.3, at) for i in ids],
    )
    con.execute("COMMIT")
    con.close()


# --- over HTTP --------------------------------------------------------------------------------


class Server:
    """The app of ``riskfit serve --no-auth`` plus the no-op route, on a free 127.0.0.1 port."""

    def __init__(self, db_url: str, workers: int, log: Path) -> None:
        import socket

        with socket.socket() as s:
            s.bind(("127.0.0.1", 0))
            self.port = s.getsockname()[1]
        env = {k: v for k, v in os.environ.items() if not k.startswith("RISKFIT_")}
        env |= {"RISKFIT_DATABASE_URL": db_url, "RISKFIT_AUTH_REQUIRED": "false"}
        cmd = [sys.executable, "-m", "uvicorn", "tests.benchmarks._http_app:create", "--factory"]
        args = ["--host", "127.0.0.1", "--port", str(self.port), "--log-level", "warning"]
        args += ["--workers", str(workers)] if workers > 1 else []
        self.log = log.open("wb")
        self.proc = subprocess.Popen(
            [*cmd, *args], env=env, stdout=self.log, stderr=self.log, cwd=ROOT
        )
        self.url = f"http://127.0.0.1:{self.port}"
        import httpx

        deadline = time.monotonic() + 60
        while time.monotonic() < deadline:
            if self.proc.poll() is not None:
                raise RuntimeError(f"server exited: {log.read_text()[-2000:]}")
            try:
                if httpx.get(f"{self.url}/readyz", timeout=2).status_code == 200:
                    return
            except httpx.TransportError:
                time.sleep(0.2)
        raise RuntimeError("server not ready within 60 s")

    def stop(self) -> None:
        self.proc.terminate()
        try:
            self.proc.wait(timeout=20)
        except subprocess.TimeoutExpired:
            self.proc.kill()
        self.log.close()


def _wrk(url: str, seconds: float, body: bytes | None, tmp: Path) -> dict[str, float]:
    script = tmp / "post.lua"
    if body is not None:
        script.write_text(
            'wrk.method = "POST"\nwrk.headers["Content-Type"] = "application/json"\n'
            f"wrk.body = [[{body.decode()}]]\n"
        )
    cmd = ["wrk", "-t2", "-c16", f"-d{max(1, round(seconds))}s", "--latency", url]
    if body is not None:
        cmd[1:1] = ["-s", str(script)]
    out = subprocess.run(cmd, capture_output=True, text=True, timeout=seconds + 60).stdout
    rps = float(re.search(r"Requests/sec:\s+([\d.]+)", out).group(1))  # type: ignore[union-attr]
    total = int(re.search(r"(\d+) requests in", out).group(1))  # type: ignore[union-attr]
    non2xx = re.search(r"Non-2xx or 3xx responses: (\d+)", out)

    def pct(q: str) -> float:
        m = re.search(rf"\s{q}%\s+([\d.]+)(us|ms|s)", out)
        if m is None:
            return float("nan")
        return float(m.group(1)) * {"us": 1e-3, "ms": 1.0, "s": 1e3}[m.group(2)]

    return {
        "rps": rps,
        "p50": pct("50"),
        "p99": pct("99"),
        "ok": total - (int(non2xx.group(1)) if non2xx else 0),
        "bad": int(non2xx.group(1)) if non2xx else 0,
    }


def _httpx_load(url: str, seconds: float, body: bytes | None) -> dict[str, float]:
    from tests.reliability._load import hammer

    base, path = url.split("/", 3)[:3], "/" + url.split("/", 3)[3]
    headers = {"content-type": "application/json"}

    async def request(client: Any, _w: int, _i: int) -> Any:
        if body is None:
            return await client.get(path)
        return await client.post(path, content=body, headers=headers)

    res = asyncio.run(
        hammer("/".join(base), request, concurrency=16, seconds=seconds, max_requests=200_000)
    )
    return {
        "rps": res.throughput,
        "p50": res.percentile_ms(50),
        "p99": res.percentile_ms(99),
        "ok": len(res.latencies),
        "bad": len(res.failures),
    }


def bench_http(repeat: int, workers: int, seconds: float, rounds: int) -> None:
    import httpx

    from tests.api._data import fit_body
    from tests.benchmarks._http_app import NOOP_PATH

    tmp = Path(tempfile.mkdtemp(prefix="bench-scoring-http-"))
    server = Server(f"sqlite:///{tmp}/http.db", workers, tmp / "server.log")
    batch_ids: list[str] = []  # every score id a batch answer returned
    acked = 0  # scores acknowledged (batch answers plus 2xx single-record answers)
    try:
        client = httpx.Client(base_url=server.url, timeout=120)
        r = client.post(f"/risk-models/{MODEL}/versions", json=fit_body())
        assert r.status_code == 201, r.text
        cols = _batch_columns(N_BATCH, 5)
        bodies = {
            "rows": orjson.dumps({"records": _rows(cols)}),
            "columns": orjson.dumps({"columns": cols}),
        }
        headers = {"content-type": "application/json"}
        url = f"/risk-models/{MODEL}/scores"
        print(f"HTTP, riskfit serve --workers {workers}, SQLite (synchronous=FULL)")
        print(f"  batch of {N_BATCH:,} records, best of {repeat}:")
        for layout, body in bodies.items():
            answers: list[bytes] = []

            def post(body: bytes = body, answers: list[bytes] = answers) -> None:
                resp = client.post(url, content=body, headers=headers)  # the answer read in full
                assert resp.status_code == 200, resp.text[:300]
                answers.append(resp.content)  # parsed after the clock stops

            post()  # warm-up (counted in the log check like the others)
            t = _best(post, repeat)
            for a in answers:
                batch_ids.extend(s["score_id"] for s in orjson.loads(a)["scores"])
            mib = len(body) / 2**20
            _row(f"POST /scores, {layout} layout ({mib:.1f} MiB body)", t, N_BATCH)
        acked = len(batch_ids)
        single = orjson.dumps({"records": _rows(_batch_columns(1, 9))})
        tool = "wrk" if shutil.which("wrk") else "httpx asyncio loop"
        each = max(1.0, seconds / rounds)

        def load(u: str, b: bytes | None) -> dict[str, float]:
            return _wrk(u, each, b, tmp) if tool == "wrk" else _httpx_load(u, each, b)

        targets = {
            "GET /healthz (no-op)": (f"{server.url}/healthz", None),
            "POST /bench/noop (1 record)": (f"{server.url}{NOOP_PATH}", single),
            "POST /scores (1 record)": (f"{server.url}{url}", single),
        }
        best: dict[str, dict[str, float]] = {}
        for _ in range(rounds):  # interleaved: load changes hit every endpoint alike
            for label, (u, b) in targets.items():
                m = load(u, b)
                if b is single and u.endswith(url):
                    acked += int(m["ok"])
                if label not in best or m["rps"] > best[label]["rps"]:
                    best[label] = m
        print(f"  single record, 16 connections, {rounds} x {each:g} s each ({tool}), best round:")
        print(f"  {'endpoint':<28s} {'req/s':>9s} {'p50 ms':>8s} {'p99 ms':>8s} {'non-2xx':>8s}")
        for label, m in best.items():
            print(
                f"  {label:<28s} {m['rps']:9,.0f} {m['p50']:8.2f} {m['p99']:8.2f} {m['bad']:8.0f}"
            )
        score = best["POST /scores (1 record)"]["rps"]
        print(
            f"  scoring / GET no-op throughput: {score / best['GET /healthz (no-op)']['rps']:.2f}"
            " (target >= 0.6); scoring / POST no-op: "
            f"{score / best['POST /bench/noop (1 record)']['rps']:.2f}"
        )
    finally:
        server.stop()
    con = sqlite3.connect(f"{tmp}/http.db")
    logged = con.execute("SELECT count(*) FROM score").fetchone()[0]
    con.execute("CREATE TEMP TABLE acked (id TEXT PRIMARY KEY)")
    con.executemany("INSERT INTO acked VALUES (?)", [(i,) for i in batch_ids])
    lost = con.execute("SELECT count(*) FROM acked WHERE id NOT IN (SELECT id FROM score)")
    missing = lost.fetchone()[0]
    con.close()
    verdict = "ok" if missing == 0 and logged >= acked else "SCORES LOST"
    print(
        f"  score log rows: {logged:,}; acknowledged scores: {acked:,} (batch ids missing from"
        f" the log: {missing}): {verdict}"
    )


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawTextHelpFormatter)
    ap.add_argument("--part", choices=("inproc", "http", "all"), default="all")
    ap.add_argument("--repeat", type=int, default=5, help="best of this many batches")
    ap.add_argument("--workers", type=int, default=1, help="riskfit serve --workers")
    ap.add_argument("--seconds", type=float, default=8.0, help="single-record load per endpoint")
    ap.add_argument("--rounds", type=int, default=2, help="interleaved single-record rounds")
    args = ap.parse_args()
    print(f"machine: {os.cpu_count()} cores, load average {os.getloadavg()[0]:.2f}")
    if args.part in ("inproc", "all"):
        bench_inproc(args.repeat)
    if args.part in ("http", "all"):
        bench_http(args.repeat, args.workers, min(args.seconds, 60.0), max(1, args.rounds))


if __name__ == "__main__":
    main()
