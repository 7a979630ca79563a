"""The event loop's line to the score-log append process (:mod:`service.score_log_child`).

On a SQLite file the rows of small keyless score requests go to a child process instead of
the writer thread: a thread of the server's own process has to win the GIL from the busy
event loop for every driver call and shares its CPU caches, which cost the loop more than the
insert itself (tests/benchmarks/bench_scoring.py: single-record scoring about 3,100 requests/s
through the thread, 3,600 through the process, no-op route 5,400). The loop writes a frame per
request to the child's input (an asyncio pipe transport: never blocks) and reads its answers
from a pipe protocol; a request's future is done once its rows are committed.

What the child cannot settle ends as on the thread path: a refused champion claim raises
:class:`~service.score_rows.ChampionChangedError` (the request scores again), a store failure
:class:`~service.errors.StoreError`, and code 3 (a model or version gone) hands the rows to
the writer thread, whose session path words the error. If the child exits, waiting requests
get :class:`StoreError` and later ones take the writer thread.
"""

from __future__ import annotations

import asyncio
import contextlib
import os
import struct
import subprocess
import sys
from collections.abc import Awaitable, Callable
from typing import Any

import orjson
from sqlalchemy.engine import Engine

from models_store.db import store_unavailable
from models_store.scores import bound_time
from service.errors import StoreError
from service.score_append_path import SqliteAppender
from service.score_rows import ChampionChangedError, ScoreRows

__all__ = ["ScoreLogChannel"]

_HEADER = struct.Struct("<I")
_Fallback = Callable[[ScoreRows], Awaitable[None]]


class _Answers(asyncio.Protocol):
    """Reads the child's answer lines and hands them to the channel."""

    def __init__(self, channel: ScoreLogChannel) -> None:
        self._channel = channel
        self._buffer = b""

    def data_received(self, data: bytes) -> None:
        *lines, self._buffer = (self._buffer + data).split(b"\n")
        for line in lines:
            self._channel._answered(orjson.loads(line))

    def connection_lost(self, exc: Exception | None) -> None:
        self._channel._lost()


class ScoreLogChannel:
    """Sends score rows to the append process; one per app, bound to the loop it starts on.

    The child starts with the first rows logged (:meth:`log`), so an app that scores nothing
    starts none.
    """

    def __init__(
        self,
        engine: Engine,
        *,
        busy_timeout_ms: int,
        synchronous: str,
        seen: Callable[[int, int | None], None] | None = None,
    ) -> None:
        self._dialect = engine.dialect
        database = os.path.abspath(str(engine.url.database))  # the same file wherever it runs
        self._argv = [sys.executable, "-m", "service.score_log_child", database]
        self._argv += [str(busy_timeout_ms), synchronous]
        self._seen = seen
        self._loop: asyncio.AbstractEventLoop | None = None
        self._process: subprocess.Popen[bytes] | None = None
        self._writer: asyncio.WriteTransport | None = None
        self._starting: asyncio.Task[None] | None = None
        self._ready = asyncio.Event()  # the child has said it is connected to the store
        self._pending: dict[int, tuple[asyncio.Future[None], ScoreRows, _Fallback]] = {}
        self._seq = 0
        self._stopped = False  # the child exited or was closed: the writer thread logs

    @property
    def running(self) -> bool:
        """The child is connected to the store and has not stopped."""
        return self._ready.is_set() and not self._stopped

    def takes(self, rows: ScoreRows) -> bool:
        """Rows this channel logs: small and keyless, on its loop, once the child is ready.

        The first call starts the child in the background: until it is ready (its imports
        take about half a second) the writer thread logs, so no request waits for it.
        """
        if self._stopped or not SqliteAppender.takes([rows]):
            return False
        if self._starting is None:
            self._starting = asyncio.get_running_loop().create_task(self._start())
            return False
        return self._ready.is_set() and self._on_loop()

    async def started(self, timeout: float = 30.0) -> bool:
        """Start the child if need be and wait until it is ready; False: it is not running."""
        if self._starting is None and not self._stopped:
            self._starting = asyncio.get_running_loop().create_task(self._start())
        if self._starting is not None:
            await asyncio.wait_for(asyncio.shield(self._starting), timeout)
            with contextlib.suppress(TimeoutError):
                await asyncio.wait_for(self._ready.wait(), timeout)
        return self.running

    async def log(self, rows: ScoreRows, fallback: _Fallback) -> None:
        """Log ``rows`` (that :meth:`takes`) through the child; returns once they are
        committed, or raises. ``fallback`` (the writer thread's ``submit_async``) logs rows
        the child hands back, and any that come after it stopped."""
        if self._stopped:
            await fallback(rows)
            return
        await self._submit(rows, fallback)

    async def _start(self) -> None:
        self._loop = asyncio.get_running_loop()
        try:
            process = subprocess.Popen(self._argv, stdin=subprocess.PIPE, stdout=subprocess.PIPE)
        except OSError:  # no child (e.g. out of processes): the writer thread logs
            self._stopped = True
            return
        self._process = process
        assert process.stdin is not None and process.stdout is not None
        try:
            await self._loop.connect_read_pipe(lambda: _Answers(self), process.stdout)
            self._writer, _ = await self._loop.connect_write_pipe(asyncio.Protocol, process.stdin)
        except Exception:  # the loop refused the pipes: no child, the writer thread logs
            self._stopped = True
            process.kill()
            raise

    def _submit(self, rows: ScoreRows, fallback: _Fallback) -> asyncio.Future[None]:
        assert self._loop is not None and self._writer is not None
        self._seq += 1
        future: asyncio.Future[None] = self._loop.create_future()
        self._pending[self._seq] = (future, rows, fallback)
        fresh = rows.fresh(bound_time(self._dialect, rows.created_at))
        payload = orjson.dumps([self._seq, fresh])
        self._writer.write(_HEADER.pack(len(payload)) + payload)
        return future

    async def close(self, timeout: float = 30.0) -> None:
        """Let the child finish what it was sent, then wait for it to exit."""
        self._stopped = True
        if self._starting is not None:
            with contextlib.suppress(Exception):  # a failed start left no child to wait for
                await self._starting  # the pipes are connected (or there is no child)
        process = self._process
        if process is None:
            return
        if self._writer is not None:
            self._writer.close()  # end of input: the child commits the rest and exits
        try:
            await asyncio.wait_for(asyncio.to_thread(process.wait), timeout)
        except TimeoutError:
            process.kill()
            await asyncio.to_thread(process.wait)
        self._lost()

    def _on_loop(self) -> bool:
        try:
            return asyncio.get_running_loop() is self._loop
        except RuntimeError:
            return False

    def _answered(self, answers: list[list[Any]]) -> None:
        self._ready.set()  # the first line, empty, says the child is connected
        for seq, code, value in answers:
            future, rows, fallback = self._pending.pop(seq)
            if future.cancelled():
                continue  # the request went away; its rows are committed (or not) all the same
            if code == 0:
                future.set_result(None)
            elif code == 1:
                model_id, number = value
                if self._seen is not None:
                    self._seen(model_id, number)
                future.set_exception(ChampionChangedError(model_id, number))
            elif code == 2:
                future.set_exception(store_unavailable(str(value), "sqlite"))
            else:
                _chain(asyncio.ensure_future(fallback(rows)), future)

    def _lost(self) -> None:
        """The child is gone: fail what waits (it may or may not have been committed)."""
        self._stopped = True
        pending, self._pending = self._pending, {}
        for future, _, _ in pending.values():
            if not future.done():
                future.set_exception(
                    StoreError(
                        "the score log writer process stopped before answering",
                        remedy="retry the request; if it persists, check the server's log",
                    )
                )
        if self._writer is not None:
            self._writer.close()


def _chain(source: asyncio.Future[None], target: asyncio.Future[None]) -> None:
    def copy(done: asyncio.Future[None]) -> None:
        if target.done():
            return
        if done.cancelled():
            target.cancel()
            return
        error = done.exception()
        if error is None:
            target.set_result(None)
        else:
            target.set_exception(error)

    source.add_done_callback(copy)
