"""Group commit for the score log: many small scoring requests, one transaction, one fsync.

A request hands its rows to :meth:`ScoreLogWriter.write`, which blocks until they are committed
(or raises the request's own error), or to :meth:`ScoreLogWriter.submit`, whose future an event
loop can await (``asyncio.wrap_future``) without holding a thread. One writer thread takes
every request waiting at that moment, inserts each in a SAVEPOINT of one transaction and
commits once, then wakes the requests. No request returns before its rows are durable, exactly
as with its own commit; what is shared is the fsync and the write lock. Batches form by
themselves: while one commit is in progress the next requests queue up, so there is no timer to
tune.

A request refused on its own account (a :class:`~service.errors.RiskfitError`, e.g. a key
already used) rolls back only its SAVEPOINT and gets that error; any other failure rolls back
the whole group and every request in it gets the error (nothing of it was stored).
"""

from __future__ import annotations

import queue
import threading
from collections.abc import Callable, Sequence
from concurrent.futures import Future
from dataclasses import dataclass
from datetime import datetime
from typing import Any

from sqlalchemy.orm import Session

from models_store.orm import RiskModel
from models_store.scores import add_score_batch
from service.errors import RiskfitError, StoreError

__all__ = ["ScoreLogWriter", "ScoreRows", "writer_of"]

MAX_GROUP_ROWS = 20_000  # rows per group commit (a bound on one transaction's size)


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

    def insert(self, session: Session) -> None:
        add_score_batch(
            session=session,
            model=self.model,
            version_number=self.version_number,
            ids=self.ids,
            keys=self.keys,
            inputs_json=self.inputs_json,
            eta=self.eta,
            se_eta=self.se_eta,
            probability=self.probability,
            created_at=self.created_at,
        )


_Job = tuple[ScoreRows, "Future[None]"]
_LOCK = threading.Lock()


def writer_of(state: Any) -> ScoreLogWriter:
    """The app's writer (``state.score_writer``), started on first use from its sessions."""
    writer: ScoreLogWriter | None = getattr(state, "score_writer", None)
    if writer is None:
        with _LOCK:
            writer = getattr(state, "score_writer", None)
            if writer is None:
                writer = state.score_writer = ScoreLogWriter(state.session_factory)
    return writer


class ScoreLogWriter:
    """One daemon thread that commits queued :class:`ScoreRows` in groups."""

    def __init__(self, session_factory: Callable[[], Session]) -> None:
        self._factory = session_factory
        self._queue: queue.SimpleQueue[_Job | None] = queue.SimpleQueue()
        self._thread = threading.Thread(target=self._run, name="riskfit-score-log", daemon=True)
        self._thread.start()
        self.groups = 0  # commits made (for tests and metrics)

    def submit(self, rows: ScoreRows) -> Future[None]:
        """Queue ``rows``; the future is done once they are committed (or holds the error)."""
        done: Future[None] = Future()
        self._queue.put((rows, done))
        return done

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
        own_errors: dict[int, RiskfitError] = {}
        try:
            with self._factory() as session:
                for i, (rows, _) in enumerate(group):
                    try:
                        rows.insert(session)  # in its own SAVEPOINT
                    except StoreError:
                        raise  # the store itself failed: the whole group
                    except RiskfitError as error:
                        own_errors[i] = error
                session.commit()
        except BaseException as error:  # the group is rolled back: nothing of it was stored
            for _, done in group:
                done.set_exception(error)
            if not isinstance(error, Exception):
                raise
            return
        self.groups += 1
        for i, (_, done) in enumerate(group):
            if i in own_errors:
                done.set_exception(own_errors[i])
            else:
                done.set_result(None)
