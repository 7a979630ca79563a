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
from collections.abc import Callable, Mapping, Sequence
from concurrent.futures import Future
from dataclasses import dataclass
from datetime import datetime
from typing import Any

from sqlalchemy.orm import Session

from models_store.champions import model_with_champion
from models_store.orm import RiskModel
from models_store.scores import (
    ScoreBatch,
    ScoreParams,
    add_score_batch,
    checkpoint_wal,
    insert_score_params,
    score_rows_params,
)
from service.errors import RiskfitError, StoreError

__all__ = [
    "ChampionChangedError",
    "ScoreLogWriter",
    "ScoreRows",
    "begin_write",
    "check_champion",
    "writer_of",
]

MAX_GROUP_ROWS = 20_000  # rows per group commit (a bound on one transaction's size)
OWN_STATEMENT_ROWS = 256  # keyless batches this big get a statement with their constants inlined
CHECKPOINT_ROWS = 5_000  # rows committed between the writer's own WAL checkpoints (SQLite)
# SQLite: take the write lock at BEGIN (models_store.db's documented execution option), so the
# champion read and the insert see one state of the store; PostgreSQL ignores the option.
_WRITE_TXN = {"riskfit_sqlite_begin": "IMMEDIATE"}


class ChampionChangedError(Exception):
    """The rows were scored with a version that is no longer the champion; nothing written.

    ``number`` is the champion the commit read (None: the model has none). Never reaches a
    client: the scoring route scores again with ``number``.
    """

    def __init__(self, model_id: int, number: int | None) -> None:
        super().__init__(f"the champion of model {model_id} is now {number}")
        self.model_id = model_id
        self.number = number


@dataclass(frozen=True)
class ScoreRows:
    """One request's score-log rows, columnar (see :func:`models_store.scores.add_score_batch`)."""

    model: RiskModel
    version_number: int
    ids: Sequence[str]
    keys: Sequence[str | None] | None
    inputs_json: Sequence[str]
    eta: Sequence[float]
    se_eta: Sequence[float]
    probability: Sequence[float]
    created_at: datetime
    checks_champion: bool = False  # scored with the champion: must still be it at commit

    def columns(self) -> ScoreBatch:
        """The rows by column, as the store's insert functions take them."""
        return ScoreBatch(
            version_number=self.version_number,
            ids=self.ids,
            keys=self.keys,
            inputs_json=self.inputs_json,
            eta=self.eta,
            se_eta=self.se_eta,
            probability=self.probability,
            created_at=self.created_at,
        )

    def params(self, session: Session) -> list[ScoreParams]:
        """The rows as driver parameters (:func:`models_store.scores.score_rows_params`)."""
        dialect = session.get_bind().dialect
        return score_rows_params(dialect=dialect, model_id=self.model.id, **self.columns())

    def insert(self, session: Session) -> None:
        add_score_batch(session=session, model=self.model, **self.columns())


def check_champion(
    session: Session,
    rows: ScoreRows,
    seen: Callable[[int, int | None], None] | None = None,
    read: dict[int, int | None] | None = None,
) -> None:
    """Raise :class:`ChampionChangedError` unless ``rows`` may be written in this transaction.

    Rows that do not claim the champion pass. ``seen(model id, champion)`` is told what was
    read; ``read`` (model id -> champion) keeps the reads of one transaction.
    """
    if not rows.checks_champion:
        return
    read = {} if read is None else read
    model_id = rows.model.id
    if model_id not in read:
        found = model_with_champion(session=session, name=rows.model.name)
        read[model_id] = None if found is None else found[1]
        if seen is not None:
            seen(model_id, read[model_id])
    if read[model_id] != rows.version_number:
        raise ChampionChangedError(model_id, read[model_id])


def begin_write(session: Session) -> None:
    """Start ``session``'s transaction as a writer (SQLite: ``BEGIN IMMEDIATE``)."""
    session.connection(execution_options=_WRITE_TXN)


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
        self._since_checkpoint += sum(len(rows.ids) for rows, _ in group) if committed else 0
        if self._since_checkpoint >= CHECKPOINT_ROWS:  # after answering: off the request's path
            self._since_checkpoint = 0
            with contextlib.suppress(Exception), self._factory() as session:
                checkpoint_wal(session)  # a failure here only leaves the WAL to SQLite


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
