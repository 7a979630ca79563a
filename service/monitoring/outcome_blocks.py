"""Outcome snapshots that survive a restart: packed column blocks kept in the store.

Building a model's snapshot (:mod:`.snapshot`) row by row costs seconds per million outcomes
(the driver makes a Python object of every value). A block holds the same columns of the
model's outcome rows with ``after_id < id <= last_id`` packed into one binary value, so a new
process reads a million rows as one value of about 53 MB and views it with ``np.frombuffer``.

Layout (:data:`LAYOUT`): the columns one after another, ``n_rows`` values each, little-endian:
id int64, eta / se_eta / probability float64, outcome int8, score and outcome times int64
epoch microseconds, version int32. Blocks of a model chain: the first has ``after_id = 0``,
each next one starts where the previous ended.

Loading (a snapshot's first use in a process): the chained blocks give the rows up to the
last ``last_id``, and the block's latest receipt time is that of its last row (a lower bound,
as the snapshot needs). The snapshot's own refresh then reads what is newer and compares
counts (the consistency rule in :mod:`.snapshot`), so a block that misses a row (a
transaction that committed after the block was written) costs a full read, never a wrong
answer: every row in a block was committed when it was read, and rows are never changed or
deleted.

Sealing (:func:`seal`, run by the start-up warmer after the snapshot is up to date, in its
own transaction):

1. the stored blocks are checked: chained, and the store's count of the model's rows up to
   the last ``last_id`` equals their ``n_rows`` sum; otherwise they are all deleted;
2. ``L_new`` = the largest id received more than the snapshot's overlap ago (transactions
   that old have committed: the snapshot's own assumption); the snapshot's rows with
   ``L < id <= L_new`` are sealed, in id order and blocks of at most :data:`BLOCK_ROWS`, if
   they number at least :data:`SEAL_MIN_ROWS` and as many as the store holds in that range.

Cost: the blocks repeat the outcome columns (about 53 bytes per outcome) in the store.
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta

import numpy as np
from sqlalchemy.orm import Session

from models_store._types import utcnow
from models_store.orm import Outcome, OutcomeColumnBlock, RiskModel
from models_store.outcome_blocks import (
    add_outcome_block,
    count_outcomes_between,
    delete_outcome_blocks,
    latest_id_received_before,
    list_outcome_blocks,
)

__all__ = ["BLOCK_ROWS", "LAYOUT", "SEAL_MIN_ROWS", "load", "pack", "seal", "unpack"]

COLUMNS = (
    ("id", "<i8"),
    ("eta", "<f8"),
    ("se_eta", "<f8"),
    ("probability", "<f8"),
    ("outcome", "i1"),
    ("scored_us", "<i8"),
    ("observed_us", "<i8"),
    ("version", "<i4"),
)
LAYOUT = "v1 " + " ".join(f"{name}:{dtype}" for name, dtype in COLUMNS)
BLOCK_ROWS = 1_000_000
SEAL_MIN_ROWS = 50_000  # fewer new rows than this are left to the row-by-row refresh


def pack(cols: dict[str, np.ndarray], rows: np.ndarray) -> bytes:
    """The ``rows`` (indices) of ``cols`` in :data:`LAYOUT`."""
    return b"".join(np.ascontiguousarray(cols[n][rows], dtype=t).tobytes() for n, t in COLUMNS)


def unpack(data: bytes, n: int) -> dict[str, np.ndarray]:
    """Read-only (n,) column views of one packed block."""
    out: dict[str, np.ndarray] = {}
    offset = 0
    for name, dtype in COLUMNS:
        out[name] = np.frombuffer(data, dtype=np.dtype(dtype), count=n, offset=offset)
        offset += n * np.dtype(dtype).itemsize
    if offset != len(data):
        raise ValueError(f"outcome block of {len(data)} bytes does not hold {n} rows")
    return out


def _chained(blocks: list[OutcomeColumnBlock]) -> bool:
    after = 0
    for b in blocks:
        if b.after_id != after or b.layout != LAYOUT:
            return False
        after = b.last_id
    return True


def _epoch_us(t: datetime) -> int:
    delta = t.astimezone(UTC) - datetime(1970, 1, 1, tzinfo=UTC)
    return (delta.days * 86_400 + delta.seconds) * 1_000_000 + delta.microseconds


def load(session: Session, model: RiskModel) -> tuple[dict[str, np.ndarray], int] | None:
    """(columns in id order, latest receipt time) from the model's blocks; None if none."""
    blocks = list_outcome_blocks(session=session, model=model)
    if not blocks or not _chained(blocks):
        return None
    parts = [unpack(b.data, b.n_rows) for b in blocks]
    if len(parts) == 1:
        cols = parts[0]
    else:
        cols = {name: np.concatenate([p[name] for p in parts]) for name, _ in COLUMNS}
    return cols, max(_epoch_us(b.latest_received_at) for b in blocks)


def seal(
    session: Session,
    model: RiskModel,
    cols: dict[str, np.ndarray],
    *,
    overlap: timedelta,
    min_rows: int | None = None,
    block_rows: int = BLOCK_ROWS,
) -> int:
    """Write blocks for the snapshot ``cols`` (see module docstring); rows sealed. No commit."""
    min_rows = SEAL_MIN_ROWS if min_rows is None else min_rows
    blocks = list_outcome_blocks(session=session, model=model, with_data=False)
    last = blocks[-1].last_id if blocks else 0
    held = sum(b.n_rows for b in blocks)
    if blocks and (
        not _chained(blocks)
        or count_outcomes_between(session=session, model=model, after_id=0, last_id=last) != held
    ):
        delete_outcome_blocks(session=session, model=model)
        last = 0
    ids = cols["id"]
    if np.count_nonzero(ids > last) < max(1, min_rows):  # too few new rows: skip the scan
        return 0
    upto = latest_id_received_before(session=session, model=model, before=utcnow() - overlap)
    rows = np.flatnonzero((ids > last) & (ids <= upto))
    stored = count_outcomes_between(session=session, model=model, after_id=last, last_id=upto)
    if rows.size < max(1, min_rows) or rows.size != stored:
        return 0
    rows = rows[np.argsort(ids[rows], kind="stable")]
    sealed = 0
    for a in range(0, rows.size, block_rows):
        part = rows[a : a + block_rows]
        last_id = int(ids[part[-1]])
        newest = session.get(Outcome, last_id)  # its receipt time: a lower bound of the block's
        if newest is None:  # not in the store after all: leave it to the next warm-up
            break
        add_outcome_block(
            session=session,
            model=model,
            after_id=last,
            last_id=last_id,
            n_rows=int(part.size),
            latest_received_at=newest.received_at,
            layout=LAYOUT,
            data=pack(cols, part),
        )
        last = last_id
        sealed += int(part.size)
    return sealed
