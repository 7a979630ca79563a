"""The score-log append process (service.score_log_channel and service.score_log_child).

On a SQLite file the app logs small keyless requests through a child process (on by
default: the other API tests run through it too). What the child cannot settle must end as
on the writer thread's path: a refused champion claim, a locked store (StoreError, nothing
stored, the next request works), rows handed back to the thread, a child that died (later
requests take the thread), and a shutdown that commits what was sent.
"""

from __future__ import annotations

import asyncio
import os
import signal
import sqlite3
import struct
import time
from typing import Any

import orjson
import pytest

from models_store.score_append import APPEND_MAX_ROWS
from service.errors import StoreError
from service.score_log_channel import ScoreLogChannel
from service.score_log_child import _frames, _groups
from service.score_rows import ChampionChangedError, ScoreRows
from tests.api._data import NEW_RECORDS
from tests.api._score_log import score_count, score_rows, two_versions_on_sqlite
from tests.api.conftest import ApiClient

FIT = "/risk-models/water-mains/versions"
SCORES = "/risk-models/water-mains/scores"


def _channel(api: ApiClient, busy_timeout_ms: int = 30_000) -> ScoreLogChannel:
    return ScoreLogChannel(
        api.app.state.engine, busy_timeout_ms=busy_timeout_ms, synchronous="FULL"
    )


async def _never(rows: ScoreRows) -> None:
    raise AssertionError(f"handed back to the thread: {rows.ids}")


def test_the_app_logs_small_requests_through_the_child(api: ApiClient) -> None:
    two_versions_on_sqlite(api)
    channel = api.app.state.score_channel
    assert channel is not None and not channel.running  # started by the first score only
    r = api.post(SCORES, json={"records": NEW_RECORDS[:2]})  # the thread logs while it starts
    assert r.status_code == 200, r.text
    assert api._run(channel.started()) and score_count(api) == 2
    sent = channel._seq
    assert api.post(SCORES, json={"records": NEW_RECORDS[:1]}).status_code == 200
    assert channel._seq == sent + 1 and score_count(api) == 3  # through the child
    keyed = [{**NEW_RECORDS[0], "key": "k-1"}]  # keys take the writer thread's session path
    assert api.post(SCORES, json={"records": keyed}).status_code == 200
    assert api.post(SCORES, json={"records": keyed}).status_code == 409
    assert channel._seq == sent + 1 and score_count(api) == 4


def test_refused_claims_and_rows_by_number(api: ApiClient) -> None:
    model = two_versions_on_sqlite(api)
    channel = _channel(api)

    async def run() -> list[Any]:
        assert await channel.started()
        jobs = [
            channel.log(score_rows(model, 1, 3), _never),
            channel.log(score_rows(model, 2, 2), _never),  # claims version 2: not the champion
            channel.log(score_rows(model, 2, 4, claims=False), _never),
        ]
        try:
            return await asyncio.gather(*jobs, return_exceptions=True)
        finally:
            await channel.close()

    ok, refused, by_number = api._run(run())
    assert ok is None and by_number is None
    assert isinstance(refused, ChampionChangedError) and refused.number == 1
    assert score_count(api) == 7


def test_a_locked_store_refuses_the_request_then_recovers(api: ApiClient) -> None:
    model = two_versions_on_sqlite(api)
    channel = _channel(api, busy_timeout_ms=50)
    holder = sqlite3.connect(api.app.state.engine.url.database, isolation_level=None)

    async def run() -> None:
        assert await channel.started()
        await channel.log(score_rows(model, 1), _never)
        holder.execute("BEGIN IMMEDIATE")  # another writer holds the lock past the timeout
        with pytest.raises(StoreError, match=r"locked|busy"):
            await channel.log(score_rows(model, 1, 3), _never)
        holder.execute("ROLLBACK")
        await channel.log(score_rows(model, 1), _never)
        await channel.close()

    try:
        api._run(run())
    finally:
        holder.close()
    assert score_count(api) == 2  # nothing of the refused request


def test_rows_the_child_cannot_place_go_to_the_thread(api: ApiClient) -> None:
    model = two_versions_on_sqlite(api)
    channel = _channel(api)
    handed: list[ScoreRows] = []

    async def fallback(rows: ScoreRows) -> None:
        handed.append(rows)

    async def run() -> None:
        assert await channel.started()
        await channel.log(score_rows(model, 9, claims=False), fallback)  # no version 9
        await channel.log(score_rows(model, 1), _never)
        await channel.close()

    api._run(run())
    assert len(handed) == 1 and handed[0].version_number == 9
    assert score_count(api) == 1


def test_after_the_child_dies_the_thread_logs(api: ApiClient) -> None:
    two_versions_on_sqlite(api)
    channel = api.app.state.score_channel
    assert api.post(SCORES, json={"records": NEW_RECORDS[:1]}).status_code == 200
    assert api._run(channel.started())
    os.kill(channel._process.pid, signal.SIGKILL)
    deadline = time.monotonic() + 10
    while channel.running and time.monotonic() < deadline:
        api._run(asyncio.sleep(0.02))  # the loop sees the pipe close
    assert not channel.running
    r = api.post(SCORES, json={"records": NEW_RECORDS[:2]})
    assert r.status_code == 200, r.text
    assert score_count(api) == 3


def test_close_commits_what_was_sent(api: ApiClient) -> None:
    model = two_versions_on_sqlite(api)
    channel = _channel(api)

    async def run() -> int | None:
        assert await channel.started()
        await channel.log(score_rows(model, 1), _never)
        futures = [
            asyncio.ensure_future(channel.log(score_rows(model, 1), _never)) for _ in range(50)
        ]
        await asyncio.sleep(0)  # each task has sent its rows and waits for the answer
        await channel.close()
        await asyncio.gather(*futures)
        return channel._process.returncode if channel._process else None

    assert api._run(run()) == 0
    assert score_count(api) == 51


def test_frames_and_groups_of_the_child() -> None:
    payloads = [orjson.dumps([i, [[f"id{i}-{k}", 1, 1, "{}", 0.0, 0.0, 0.5, "t", 1]
                                  for k in range(n)]])
                for i, n in enumerate((600, 300, 200, 1))]  # fmt: skip
    stream = b"".join(struct.pack("<I", len(p)) + p for p in payloads)
    buffer = bytearray(stream[:-5])  # the last frame not complete yet
    requests = list(_frames(buffer))
    assert [seq for seq, _ in requests] == [0, 1, 2] and len(buffer) == len(payloads[3]) - 1
    buffer += stream[-5:]
    requests += list(_frames(buffer))
    assert [seq for seq, _ in requests] == [0, 1, 2, 3] and not buffer
    cut = [[seq for seq, _ in g] for g in _groups(requests)]
    assert cut == [[0, 1], [2, 3]]  # 600 + 300 rows, then 200 + 1: never over the limit
    assert all(sum(len(r) for _, r in g) <= APPEND_MAX_ROWS for g in _groups(requests))


def test_the_child_outlives_a_terminal_interrupt(api: ApiClient) -> None:
    """Ctrl-C and a service manager's SIGTERM reach the whole process group; the child must
    keep going until its server closes its input (then it commits what it was sent)."""
    model = two_versions_on_sqlite(api)
    channel = _channel(api)

    async def run() -> None:
        assert await channel.started()
        assert channel._process is not None
        for sig in (signal.SIGINT, signal.SIGTERM):
            os.kill(channel._process.pid, sig)
        await asyncio.sleep(0.2)
        await channel.log(score_rows(model, 1), _never)
        await channel.close()

    api._run(run())
    assert score_count(api) == 1
