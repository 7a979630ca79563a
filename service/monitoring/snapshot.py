"""An in-memory column snapshot of each model's scored outcomes, refreshed incrementally.

Reading a million outcome rows from the store costs seconds; computing every measure from
numpy columns costs a fraction of that. :class:`OutcomeSnapshots` therefore keeps, per model,
the columns of every stored outcome (outcome id, prediction, outcome, score and outcome times
as integer epoch microseconds, version) and the latest receipt time it holds, and brings them
up to date on each use. A read is one query whose driver tuples are flattened into one float64
array (``np.fromiter``, no per-row Python beyond the driver's), after one ``max(received_at)``
taken first (so the receipt time kept is never later than the rows read).

Consistency rule. Outcome rows are append-only (the first outcome of a score stands; no row
is updated or deleted), so a snapshot is always a subset of the committed rows. On each use:

1. ``n_store`` = the model's outcome count (one indexed count);
2. if the snapshot holds ``n_store`` rows it equals the store (a subset of equal size) and
   is used as is;
3. otherwise the rows with an outcome id above the largest one held are read and appended
   (ids grow with insertion; on SQLite, with one writer at a time, this is already all);
4. if the snapshot still holds fewer than ``n_store`` rows (on PostgreSQL a transaction may
   commit after one that took later ids), the rows received since ``(latest received_at
   held) - overlap`` are read again and those whose outcome id is already held are dropped
   (dedupe by id); :data:`OVERLAP` covers writers that began before that receipt time;
5. if it still holds fewer than ``n_store`` rows (a transaction slower than the overlap),
   the model is read again in full.

A snapshot's first use in a process starts from the model's packed column blocks in the
store when there are any (:mod:`.outcome_blocks`: one binary read instead of a row-by-row
one), then follows the same steps; a block only ever holds committed rows, so the rule holds.

So every answer includes at least every outcome committed before its count was taken, never
counts an outcome twice, and never shows one that was not committed. Snapshots are per
process (each server worker has its own) and bounded to :data:`MAX_MODELS` models, least
recently used first out. The arrays are kept in score-time order.
"""

from __future__ import annotations

import itertools
import threading
from collections import OrderedDict
from dataclasses import dataclass
from datetime import UTC, datetime, timedelta
from typing import Any

import numpy as np
from sqlalchemy import BigInteger, Float, cast, func, select
from sqlalchemy.orm import Session

from models_store.columns import epoch_micros
from models_store.orm import Outcome, RiskModel
from models_store.scores import ScoreColumns
from service.monitoring import outcome_blocks

__all__ = ["MAX_MODELS", "OVERLAP", "OutcomeSnapshots", "Snapshot"]

OVERLAP = timedelta(minutes=5)
MAX_MODELS = 8
_FIELDS = ("id", "eta", "se_eta", "probability", "outcome", "scored_us", "observed_us",
           "version")  # fmt: skip


@dataclass(frozen=True)
class Snapshot:
    """Columns (n,) of one model's outcomes in score-time order; ``columns()`` for a subset."""

    cols: dict[str, np.ndarray]
    received_us: int = 0  # latest receipt time held (epoch microseconds; 0: none)

    @property
    def n(self) -> int:
        return int(self.cols["id"].shape[0])

    def columns(
        self,
        *,
        since: datetime | None = None,
        until: datetime | None = None,
        on: str = "score",
        version: int | None = None,
    ) -> ScoreColumns:
        """The rows in ``[since, until)`` on score or outcome time (and one version), as
        :class:`ScoreColumns` in that time's order (the store's own read, from memory)."""
        t = self.cols["scored_us" if on == "score" else "observed_us"]
        keep = np.ones(self.n, dtype=bool)  # (n,) rows in the window
        if since is not None:
            keep &= t >= _to_us(since)
        if until is not None:
            keep &= t < _to_us(until)
        if version is not None:
            keep &= self.cols["version"] == version
        idx: np.ndarray | slice = slice(None) if keep.all() else np.flatnonzero(keep)
        if on != "score":
            sel = np.arange(self.n) if isinstance(idx, slice) else idx
            idx = sel[np.argsort(t[sel], kind="stable")]
        c = self.cols  # a slice(None) gives views: the snapshot's arrays are never written
        return ScoreColumns(
            eta=c["eta"][idx],
            se_eta=c["se_eta"][idx],
            probability=c["probability"][idx],
            outcome=c["outcome"][idx],
            created_at=c["scored_us"][idx].view("datetime64[us]"),
            observed_at=c["observed_us"][idx].view("datetime64[us]"),
            version=c["version"][idx],
        )


def _to_us(t: datetime) -> int:
    delta = t.astimezone(UTC) - datetime(1970, 1, 1, tzinfo=UTC)
    return (delta.days * 86_400 + delta.seconds) * 1_000_000 + delta.microseconds


def _read(
    session: Session,
    model: RiskModel,
    *,
    after_id: int | None = None,
    received_since: datetime | None = None,
) -> tuple[dict[str, Any], int]:
    """The model's outcome rows (with an id above ``after_id``, received since
    ``received_since``) through the DB-API cursor, as arrays, and their latest receipt time
    (epoch microseconds, taken before the rows: a lower bound; 0 when there are none)."""
    conn = session.connection()
    dialect = conn.dialect.name
    where = [Outcome.model_id == model.id]
    if after_id is not None:
        where.append(Outcome.id > after_id)
    if received_since is not None:
        where.append(Outcome.received_at >= received_since)
    latest = conn.execute(select(func.max(Outcome.received_at)).where(*where)).scalar()
    stmt = select(
        cast(Outcome.id, BigInteger),
        cast(Outcome.eta, Float(53)),
        cast(Outcome.se_eta, Float(53)),
        cast(Outcome.probability, Float(53)),
        cast(Outcome.outcome, BigInteger),
        epoch_micros(Outcome.scored_at, dialect),
        epoch_micros(Outcome.observed_at, dialect),
        cast(Outcome.version_number, BigInteger),
    ).where(*where)
    result = conn.execute(stmt)
    raw = result.cursor.fetchall() if result.cursor is not None else []
    result.close()
    # ids and epoch microseconds (~1.7e15) are exact in float64 (below 2**53)
    flat = itertools.chain.from_iterable(raw)
    table = np.fromiter(flat, dtype=np.float64, count=len(raw) * len(_FIELDS))
    table = table.reshape(-1, len(_FIELDS))
    out = {name: table[:, i] for i, name in enumerate(_FIELDS)}
    for name in ("id", "scored_us", "observed_us"):
        out[name] = out[name].astype(np.int64)
    out["outcome"] = out["outcome"].astype(np.int8)
    out["version"] = out["version"].astype(np.int32)
    for name in ("eta", "se_eta", "probability"):
        out[name] = np.ascontiguousarray(out[name])
    return out, 0 if latest is None or not raw else _to_us(latest)


def _snapshot(cols: dict[str, np.ndarray], received_us: int) -> Snapshot:
    return Snapshot(_sorted(cols), received_us)


def _sorted(cols: dict[str, np.ndarray]) -> dict[str, np.ndarray]:
    t = cols["scored_us"]
    if t.size < 2 or bool(np.all(t[1:] >= t[:-1])):
        return cols
    order = np.argsort(t, kind="stable")
    return {k: np.ascontiguousarray(v[order]) for k, v in cols.items()}


def _count(session: Session, model: RiskModel) -> int:
    stmt = select(func.count()).select_from(Outcome).where(Outcome.model_id == model.id)
    return int(session.scalar(stmt) or 0)


class OutcomeSnapshots:
    """Per-model snapshots (see module docstring); thread-safe, one refresh at a time per model."""

    def __init__(
        self, max_models: int = MAX_MODELS, overlap: timedelta = OVERLAP, use_blocks: bool = True
    ) -> None:
        self.max_models = max_models
        self.overlap = overlap
        self.use_blocks = use_blocks  # start from the stored column blocks (.outcome_blocks)
        self._items: OrderedDict[int, Snapshot] = OrderedDict()
        self._locks: dict[int, threading.Lock] = {}
        self._lock = threading.Lock()
        self.full_reads = 0  # for tests and benchmarks: how often a model was read in full
        self.block_loads = 0  # how often a snapshot started from stored blocks

    def _model_lock(self, model_id: int) -> threading.Lock:
        with self._lock:
            return self._locks.setdefault(model_id, threading.Lock())

    def get(self, session: Session, model: RiskModel) -> Snapshot:
        """The up-to-date snapshot of ``model`` (reads only what is new)."""
        with self._model_lock(model.id):
            n_store = _count(session, model)
            with self._lock:
                snap = self._items.get(model.id)
            if snap is None and self.use_blocks and n_store:
                stored = outcome_blocks.load(session, model)
                if stored is not None:
                    self.block_loads += 1
                    snap = _snapshot(*stored)
            if snap is not None and snap.n < n_store:
                snap = self._extend(session, model, snap, n_store)
            if snap is None or snap.n < n_store:
                self.full_reads += 1
                snap = _snapshot(*_read(session, model))
            with self._lock:
                self._items[model.id] = snap
                self._items.move_to_end(model.id)
                while len(self._items) > self.max_models:
                    self._items.popitem(last=False)
            return snap

    def _extend(self, session: Session, model: RiskModel, snap: Snapshot, n_store: int) -> Snapshot:
        latest = snap.received_us
        snap = _merge(snap, *_read(session, model, after_id=int(snap.cols["id"].max(initial=0))))
        if snap.n >= n_store:
            return snap
        since = datetime(1970, 1, 1, tzinfo=UTC) + timedelta(microseconds=latest) - self.overlap
        return _merge(snap, *_read(session, model, received_since=since))


def _merge(snap: Snapshot, new: dict[str, np.ndarray], received_us: int) -> Snapshot:
    """``snap`` plus the rows of ``new`` whose outcome id it does not hold yet."""
    if new["id"].size == 0:
        return snap
    fresh = ~np.isin(new["id"], snap.cols["id"][snap.cols["id"] >= new["id"].min()])
    if not fresh.any():
        return snap
    merged = {k: np.concatenate([snap.cols[k], new[k][fresh]]) for k in _FIELDS}
    return _snapshot(merged, max(snap.received_us, received_us))
