"""kill -9 of a live server process in the middle of a refit; the next cron refit runs.

Two ``riskfit serve`` processes share one store (a SQLite file, and a PostgreSQL database
when RISKFIT_TEST_POSTGRES_URL is set), with a short refit lease
(``RISKFIT_REFIT_LOCK_LEASE_SECONDS``). Process A pauses every refit before its decision
(tests/reliability/_slow_refit_server.py), so its refit is certainly running when:

1. one and a half leases into A's refit, ``riskfit refit`` (cron's command) against B exits
   3 with 409: A's heartbeat kept renewing the lease past its first expiry;
2. A is killed with SIGKILL (no clean-up runs);
3. a refit asked of B at once is refused (409): A's lease has not yet run out; then
   ``riskfit refit`` against B is tried every few tenths of a second until it runs (exit 0),
   within about one lease of the kill (the lease, a renewal interval, one try of the command
   and the refit itself);
4. the store is consistent (no half-written version), A's refit is recorded ``failed`` with
   the reason ``refit_interrupted`` ("... stopped renewing it ..."), B's ``succeeded``,
   and no lock row is left.

Before the lease and heartbeat, the lock's one-hour lease kept every retry at 409 and the
killed refit left no record.
"""

from __future__ import annotations

import sys
import threading
import time
from collections.abc import Callable
from concurrent.futures import ThreadPoolExecutor
from typing import Any

import httpx
import pytest
from sqlalchemy import select
from sqlalchemy.engine import Engine

from models_store.db import upgrade
from models_store.orm import ModelVersion, RefitLock, RefitRun
from tests.cli._refit_data import SPEC, scored_records, training_columns
from tests.reliability._checks import store_problems, table_count
from tests.reliability._server import ServerProcess, riskfit_cli

pytestmark = pytest.mark.slow

MODEL = "mains"
LEASE_S = 3.0
DELAY_S = 60.0  # A's pause before deciding: the kill comes long before it ends
SLOW_SERVER = [
    sys.executable,
    "-m",
    "tests.reliability._slow_refit_server",
    "serve",
    "--host",
    "127.0.0.1",
    "--port",
    "{port}",
    "--log-level",
    "warning",
]


def _setup(client: httpx.Client) -> None:
    """Version 1 of MODEL, 1000 scored records whose outcomes moved up on the logit."""
    body = {**SPEC, "data": {"columns": training_columns(5000, 12)}}
    assert client.post(f"/risk-models/{MODEL}/versions", json=body).status_code == 201
    records, y = scored_records(1000, "shift", 12)
    scored = client.post(f"/risk-models/{MODEL}/scores", json={"records": records})
    assert scored.status_code == 200, scored.text
    items = [
        {"score_id": s["score_id"], "outcome": o}
        for s, o in zip(scored.json()["scores"], y, strict=True)
    ]
    answer = client.post(f"/risk-models/{MODEL}/outcomes", json={"outcomes": items})
    assert answer.status_code == 200, answer.text


def _runs(engine: Engine) -> list[Any]:
    with engine.connect() as conn:
        return list(conn.execute(select(RefitRun).order_by(RefitRun.id)).all())


def _wait_for_lock(engine: Engine, timeout: float = 60.0) -> None:
    deadline = time.monotonic() + timeout
    while time.monotonic() < deadline:
        if table_count(engine, RefitLock):
            return
        time.sleep(0.05)
    raise AssertionError("the refit never took the lock")


def test_kill_during_refit_frees_the_lock_within_a_lease_and_records_the_run(
    database_url: str,
    servers: Callable[..., ServerProcess],
    engine_for: Callable[[str], Engine],
) -> None:
    env = {"RISKFIT_REFIT_LOCK_LEASE_SECONDS": str(LEASE_S), "TEST_REFIT_DELAY_S": str(DELAY_S)}
    t0 = time.monotonic()
    upgrade(database_url)  # the schema first: then both servers start at once
    with ThreadPoolExecutor(2) as pool:
        slow_start = pool.submit(servers, database_url, name="slow", env=env, command=SLOW_SERVER)
        other_start = pool.submit(servers, database_url, name="other", env=env)
        slow, other = slow_start.result(), other_start.result()
    started_s = time.monotonic() - t0
    engine = engine_for(database_url)
    with httpx.Client(base_url=other.base_url, timeout=60.0) as client:
        _setup(client)

    cut: dict[str, Any] = {}

    def refit_on_slow() -> None:
        try:
            cut["status"] = httpx.post(
                f"{slow.base_url}/risk-models/{MODEL}/refits", json={}, timeout=60.0
            ).status_code
        except httpx.TransportError as error:
            cut["error"] = repr(error)

    thread = threading.Thread(target=refit_on_slow, daemon=True)
    thread.start()
    _wait_for_lock(engine)
    time.sleep(1.5 * LEASE_S)
    busy = riskfit_cli("refit", MODEL, "--url", other.base_url, database_url=database_url)
    assert busy.returncode == 3 and "409 refit_in_progress" in busy.stderr, busy.stderr

    slow.kill()
    killed_at = time.monotonic()
    thread.join(30.0)
    assert "status" not in cut, f"the refit finished before the kill: {cut}"
    killed = _runs(engine)  # recorded when it took the lock, before any work
    assert table_count(engine, ModelVersion) == 1 and store_problems(engine) == []

    # at once (an HTTP request, quicker than starting the command): the dead lease holds
    right_after = httpx.post(f"{other.base_url}/risk-models/{MODEL}/refits", json={}, timeout=30)
    assert right_after.status_code == 409, right_after.text
    tries: list[tuple[float, int]] = [(round(time.monotonic() - killed_at, 2), 409)]
    done = None
    while time.monotonic() - killed_at < LEASE_S + 30.0:
        done = riskfit_cli("refit", MODEL, "--url", other.base_url, database_url=database_url)
        tries.append((round(time.monotonic() - killed_at, 2), done.returncode))
        if done.returncode != 3:
            break
        assert "409 refit_in_progress" in done.stderr, done.stderr
        time.sleep(0.2)
    assert done is not None and done.returncode == 0, (tries, done and done.stderr)
    freed_after = tries[-1][0]
    print(
        f"\nrefit kill -9: lease {LEASE_S} s; cron tries after the kill (s, exit): {tries}; "
        f"servers ready after {started_s:.1f} s, killed at {killed_at - t0:.1f} s"
    )
    # the lease (at most one lease after the last renewal), a renewal interval, one try of
    # the command (a Python start) and the refit itself; generous for a loaded machine
    assert freed_after <= LEASE_S + 12.0, tries
    assert "promoted" in done.stdout

    assert [r.status for r in killed] == ["running"], "the killed refit left no record"
    killed_run = killed[0]
    runs = _runs(engine)
    assert [r.id for r in runs] == [killed_run.id, killed_run.id + 1]
    interrupted, ran = runs
    assert interrupted.status == "failed" and interrupted.finished_at is not None
    error = interrupted.result["error"]
    assert error["code"] == "refit_interrupted"
    assert "stopped renewing" in error["message"] and "lease_expired_at" in error["details"]
    assert ran.status == "succeeded" and ran.result["challenger_version"] == 2
    assert table_count(engine, ModelVersion) == 2 and table_count(engine, RefitLock) == 0
    assert store_problems(engine) == []
    with httpx.Client(base_url=other.base_url, timeout=30.0) as client:
        listed = client.get(f"/risk-models/{MODEL}/refits")
        assert listed.status_code == 200, listed.text
        items = {item["refit_id"]: item for item in listed.json()["items"]}
        assert items[killed_run.id]["status"] == "failed"
        assert items[killed_run.id]["error"]["code"] == "refit_interrupted"
