"""Group commit for the score log: many small scoring requests, one transaction, one fsync.

A request hands its rows to :meth:`ScoreLogWriter.write`, which blocks until they are committed
(or raises the request's own error), to :meth:`ScoreLogWriter.submit` (a future to wait on), or
from a coroutine to :meth:`ScoreLogWriter.submit_async`, awaited without holding a thread (the
writer wakes each event loop once per group, not once per request). One writer thread takes
every request waiting at that moment, inserts each in a SAVEPOINT of one transaction and
commits once, then wakes the requests. No request returns before its rows are durable, exactly
as with its own commit; what is shared is the fsync and the write lock. Batches form by
themselves: while one commit is in progress the next requests queue up, so there is no timer to
tune.

A request refused on its own account (a :class:`~service.errors.RiskfitError`, e.g. a key
already used) rolls back only its SAVEPOINT and gets that error; any other failure rolls back
the whole group and every request in it gets the error (nothing of it was stored). Rows
without client keys (most of them) cannot be refused on their own account: those of the
group's small requests share one ``executemany``; a big batch gets multi-row statements of
its own (:func:`models_store.scores.insert_fresh_scores`). After answering a group the writer
checkpoints SQLite's write-ahead log once enough rows have gone in (:data:`CHECKPOINT_ROWS`),
so that no COMMIT a request waits for has to do it.

On SQLite a group of small keyless requests (the common case: single records and small
batches) skips the session: its rows go in one autocommitted statement on a connection the
writer keeps (:mod:`service.score_append_path`), which also checks the champion. Anything
that statement cannot settle (a key, a big batch, a model or version gone, PostgreSQL) takes
the session path below; a store failure settles the group with :class:`StoreError` as there.

Rows scored with the champion (``ScoreRows.checks_champion``) are checked against the champion
read inside the commit's write transaction (:func:`check_champion`: one indexed read per model
and group; on SQLite the transaction is ``BEGIN IMMEDIATE`` from its start, so no champion
change can commit between that read and the insert). Rows scored with another version are not
written; the request gets :class:`ChampionChangedError` naming the current champion and scores
again. This is what lets the scoring path keep the champion in memory (:mod:`service.version_cache`)
without serving a stale one.
"""

from __future__ import annotations

import asyncio
import contextlib
import queue
import threading
from collections.abc import Callable, Mapping
from concurrent.futures import Future
from dataclasses import dataclass
from typing import Any

from sqlalchemy.engine import Engine
from sqlalchemy.orm import Session

from models_store.scores import ScoreParams, checkpoint_wal, insert_score_params
from service.errors import RiskfitError, StoreError
from service.score_append_path import OWN_STATEMENT_ROWS, SqliteAppender, appends_to
from service.score_rows import ChampionChangedError, ScoreRows, begin_write, check_champion

__all__ = [
    "ChampionChangedError",
    "ScoreLogWriter",
    "ScoreRows",
    "begin_write",
    "check_champion",
    "writer_of",
]

MAX_GROUP_ROWS = 20_000  # rows per group commit (a bound on one transaction's size)
CHECKPOINT_ROWS = 5_000  # rows committed between the writer's own WAL checkpoints (SQLite)


@dataclass(frozen=True)
class _LoopWaiter:
    """An event loop's future, settled from the writer thread in one call per loop and group."""

    loop: asyncio.AbstractEventLoop
    future: asyncio.Future[None]


_Job = tuple[ScoreRows, "Future[None] | _LoopWaiter"]
_LOCK = threading.Lock()


def _settle_on_loop(outcomes: list[tuple[asyncio.Future[None], BaseException | None]]) -> None:
    for future, error in outcomes:
        if future.cancelled():
            continue  # the request went away; its rows are committed (or not) all the same
        if error is None:
            future.set_result(None)
        else:
            future.set_exception(error)


def writer_of(state: Any) -> ScoreLogWriter:
    """The app's writer (``state.score_writer``), started on first use from its sessions."""
    writer: ScoreLogWriter | None = getattr(state, "score_writer", None)
    if writer is None:
        with _LOCK:
            writer = getattr(state, "score_writer", None)
            if writer is None:
                cache = getattr(state, "version_cache", None)
                seen = None if cache is None else cache.champion_seen
                writer = state.score_writer = ScoreLogWriter(state.session_factory, seen)
    return writer


class ScoreLogWriter:
    """One daemon thread that commits queued :class:`ScoreRows` in groups."""

    def __init__(
        self,
        session_factory: Callable[[], Session],
        champion_seen: Callable[[int, int | None], None] | None = None,
    ) -> None:
        self._factory = session_factory
        self._seen = champion_seen
        self._queue: queue.SimpleQueue[_Job | None] = queue.SimpleQueue()
        self._appends: SqliteAppender | bool | None = None  # None: not looked at yet; False: no
        self._thread = threading.Thread(target=self._run, name="riskfit-score-log", daemon=True)
        self._thread.start()
        self.groups = 0  # commits made (for tests and metrics); all-refused groups make none
        self._since_checkpoint = 0  # rows committed since the last WAL checkpoint

    def submit(self, rows: ScoreRows) -> Future[None]:
        """Queue ``rows``; the future is done once they are committed (or holds the error)."""
        done: Future[None] = Future()
        self._queue.put((rows, done))
        return done

    def submit_async(self, rows: ScoreRows) -> asyncio.Future[None]:
        """:meth:`submit` for a coroutine: a future of the running loop, awaited directly.

        The writer wakes each loop once per group (one ``call_soon_threadsafe`` settles all of
        that loop's requests in the group) instead of once per request.
        """
        loop = asyncio.get_running_loop()
        future: asyncio.Future[None] = loop.create_future()
        self._queue.put((rows, _LoopWaiter(loop, future)))
        return future

    def write(self, rows: ScoreRows) -> None:
        """Queue ``rows`` and wait until they are committed; raises the request's error."""
        self.submit(rows).result()

    def close(self) -> None:
        """Finish the queued groups and stop the thread."""
        self._queue.put(None)
        self._thread.join(timeout=30)
        if not self._thread.is_alive() and isinstance(self._appends, SqliteAppender):
            self._appends.close()

    def _take_group(self, first: _Job) -> tuple[list[_Job], bool]:
        group, size, stop = [first], len(first[0].ids), False
        while size < MAX_GROUP_ROWS:
            try:
                job = self._queue.get_nowait()
            except queue.Empty:
                break
            if job is None:
                stop = True
                break
            group.append(job)
            size += len(job[0].ids)
        return group, stop

    def _run(self) -> None:
        while True:
            first = self._queue.get()
            if first is None:
                return
            group, stop = self._take_group(first)
            self._commit(group)
            if stop:
                return

    def _commit(self, group: list[_Job]) -> None:
        appender = self._appender()
        requests = [rows for rows, _ in group]
        if appender is not None and appender.takes(requests):
            try:
                outcome = appender.append(requests)
            except StoreError as failure:  # nothing of the group was stored
                _settle(group, dict.fromkeys(range(len(group)), failure))
                return
            if outcome is not None:
                inserted, errors = outcome
                self.groups += inserted > 0
                _settle(group, errors)
                self._after_commit(inserted)
                return
        self._commit_in_session(group)

    def _appender(self) -> SqliteAppender | None:
        """The SQLite one-statement path, made on first use (None: not this store)."""
        if self._appends is None:
            with self._factory() as session:
                bind = session.get_bind()
            engine = bind if isinstance(bind, Engine) else None  # not a test's outer transaction
            self._appends = (
                SqliteAppender(engine, self._seen)
                if engine is not None and appends_to(engine)
                else False
            )
        return self._appends if isinstance(self._appends, SqliteAppender) else None

    def _after_commit(self, rows: int) -> None:
        self._since_checkpoint += rows
        if self._since_checkpoint >= CHECKPOINT_ROWS:  # after answering: off the request's path
            self._since_checkpoint = 0
            with contextlib.suppress(Exception), self._factory() as session:
                checkpoint_wal(session)  # a failure here only leaves the WAL to SQLite

    def _commit_in_session(self, group: list[_Job]) -> None:
        own_errors: dict[int, Exception] = {}
        try:
            with self._factory() as session:
                begin_write(session)
                champions: dict[int, int | None] = {}  # model id -> champion read here
                keyless: list[ScoreParams] = []  # rows of the small requests without keys
                for i, (rows, _) in enumerate(group):
                    try:
                        check_champion(session, rows, self._seen, champions)
                        if rows.keys is None and len(rows.ids) < OWN_STATEMENT_ROWS:
                            keyless += rows.params(session)
                        else:  # keyed rows in their own SAVEPOINT; big ones, constants inlined
                            rows.insert(session)
                    except StoreError:
                        raise  # the store itself failed: the whole group
                    except (RiskfitError, ChampionChangedError) as error:
                        own_errors[i] = error
                # the small ones share a statement: only the store can refuse fresh ids
                insert_score_params(session=session, params=keyless)
                if len(own_errors) == len(group):
                    session.rollback()  # every request refused: nothing to make durable
                    committed = False
                else:
                    session.commit()
                    committed = True
        except BaseException as error:  # the group is rolled back: nothing of it was stored
            _settle(group, dict.fromkeys(range(len(group)), error))
            if not isinstance(error, Exception):
                raise
            return
        self.groups += committed
        _settle(group, own_errors)
        self._after_commit(sum(len(rows.ids) for rows, _ in group) if committed else 0)


def _settle(group: list[_Job], errors: Mapping[int, BaseException]) -> None:
    """Finish every job's future: its error, or done (committed)."""
    on_loops: dict[asyncio.AbstractEventLoop, list[tuple[asyncio.Future[None], Any]]] = {}
    for i, (_, done) in enumerate(group):
        error = errors.get(i)
        if isinstance(done, _LoopWaiter):
            on_loops.setdefault(done.loop, []).append((done.future, error))
        elif error is None:
            done.set_result(None)
        else:
            done.set_exception(error)
    for loop, outcomes in on_loops.items():
        with contextlib.suppress(RuntimeError):  # a closed loop: nobody waits any more
            loop.call_soon_threadsafe(_settle_on_loop, outcomes)
