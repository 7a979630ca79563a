"""Outcome ingestion: idempotent, conflict-reporting, safe under concurrent writers."""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass, field
from datetime import datetime, timedelta
from typing import Any, cast

from sqlalchemy import Table, insert, select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from models_store._types import utcnow
from models_store._util import chunks
from models_store.orm import Outcome, RiskModel, Score
from service.errors import ConflictError, DataError

__all__ = ["OutcomeItem", "OutcomeResult", "add_outcomes", "get_outcome"]

_TABLE = cast(Table, Outcome.__table__)  # Core inserts, no ORM bookkeeping

MAX_ATTEMPTS = 5
#: Default allowance for clocks that disagree (the service's setting clock_skew_seconds).
CLOCK_SKEW = timedelta(seconds=300)


@dataclass(frozen=True)
class OutcomeItem:
    """What happened to item ``index`` of the request."""

    index: int
    score_id: str | None
    key: str | None
    outcome: int
    existing: int | None = None  # the stored outcome, for duplicates and conflicts
    reason: str | None = None  # why it is unknown or in conflict


@dataclass(frozen=True)
class OutcomeResult:
    """Partition of the request: every item lands in exactly one list."""

    accepted: list[OutcomeItem] = field(default_factory=list)
    duplicates: list[OutcomeItem] = field(default_factory=list)
    conflicts: list[OutcomeItem] = field(default_factory=list)
    unknown: list[OutcomeItem] = field(default_factory=list)


@dataclass
class _Item:
    index: int
    score_id: str | None
    key: str | None
    outcome: int
    observed_at: datetime | None


def _row(
    model: RiskModel, score_id: str, item: _Item, snap: _Snapshot, now: datetime
) -> dict[str, Any]:
    _key, version, eta, se_eta, probability, scored_at = snap
    return {
        "score_id": score_id,
        "model_id": model.id,
        "outcome": item.outcome,
        "observed_at": item.observed_at or now,
        "received_at": now,
        "version_number": version,
        "eta": eta,
        "se_eta": se_eta,
        "probability": probability,
        "scored_at": scored_at,
    }


def _parse(items: Sequence[Mapping[str, Any]]) -> list[_Item]:
    parsed = []
    for i, item in enumerate(items):
        value = item.get("outcome")
        if isinstance(value, bool) or value not in (0, 1):
            raise DataError(
                "an outcome must be 0 or 1",
                field=f"outcomes[{i}].outcome",
                value=value,
                remedy="send 1 if the event happened, 0 if it did not",
            )
        score_id, key = item.get("score_id"), item.get("key")
        if score_id is None and key is None:
            raise DataError(
                "an outcome must name its score",
                field=f"outcomes[{i}]",
                value=None,
                remedy="give the score_id returned by the scores endpoint, or the record's key",
            )
        parsed.append(_Item(i, score_id, key, int(value), item.get("observed_at")))
    return parsed


def add_outcomes(
    *,
    session: Session,
    model: RiskModel,
    items: Sequence[Mapping[str, Any]],
    received_at: datetime | None = None,
    clock_skew: timedelta = CLOCK_SKEW,
) -> OutcomeResult:
    """Join outcomes to ``model``'s scores; each item names ``score_id`` or ``key``.

    * accepted: written now;
    * duplicates: the score already has this same outcome (stored or earlier in the request);
    * conflicts: the score already has the other outcome (not written; first one stands);
    * unknown: no score of this model has that id or key (or id and key disagree).

    Items: ``{"score_id"? , "key"?, "outcome": 0|1, "observed_at"?: aware datetime}``
    (``observed_at`` defaults to ``received_at``, itself defaulting to now). Concurrent
    ingestion of the same score: the unique constraint on ``outcome.score_id`` refuses the later
    insert, inside a savepoint; the batch is then re-classified against what is stored now.

    Dates: an ``observed_at`` later than ``received_at + clock_skew`` (in the future) or
    earlier than ``scored_at - clock_skew`` of the score it resolves refuses the *whole*
    batch (:class:`DataError`, 422, naming ``outcomes[i].observed_at``): nothing is written,
    as for any other malformed item.
    """
    parsed = _parse(items)
    now = received_at or utcnow()
    _check_not_future(parsed, now, clock_skew)
    resolved, unknown, snapshots = _resolve(session, model, parsed)
    _check_after_score(resolved, snapshots, clock_skew)
    for _attempt in range(MAX_ATTEMPTS):
        stored = _stored_outcomes(session, [sid for sid, _ in resolved])
        result = _classify(resolved, stored, unknown)
        accepted = {a.index for a in result.accepted}
        rows = [
            _row(model, sid, item, snapshots[sid], now)
            for sid, item in resolved
            if item.index in accepted
        ]
        rows.sort(key=lambda r: r["score_id"])  # one lock order for every writer: no deadlocks
        try:
            with session.begin_nested():
                conn = session.connection()  # Core executemany, as for scores
                for part in chunks(rows):
                    conn.execute(insert(_TABLE), list(part))
        except IntegrityError:
            continue  # someone stored one of these meanwhile: look again
        return result
    raise ConflictError(
        f"outcomes for these scores kept arriving concurrently ({MAX_ATTEMPTS} attempts)",
        field="outcomes",
        remedy="retry the request; outcomes are idempotent, so a retry is safe",
    )


_Snapshot = tuple[str | None, int, float, float, float, datetime]  # key, version, eta, se, p, at


def _refuse_dates(bad: list[_Item], message: str, remedy: str) -> None:
    first = bad[0]
    assert first.observed_at is not None
    raise DataError(
        f"{len(bad)} outcome(s) {message}; nothing was stored",
        field=f"outcomes[{first.index}].observed_at",
        value=first.observed_at.isoformat(),
        remedy=remedy,
        details={"indexes": [b.index for b in bad[:20]]},
    )


def _check_not_future(parsed: list[_Item], now: datetime, skew: timedelta) -> None:
    for p in parsed:
        if p.observed_at is not None and p.observed_at.utcoffset() is None:
            raise DataError(
                "observed_at has no UTC offset",
                field=f"outcomes[{p.index}].observed_at",
                value=p.observed_at.isoformat(),
                remedy="give observed_at with its offset, e.g. 2025-02-11T08:30:00Z",
            )
    latest = now + skew
    bad = [p for p in parsed if p.observed_at is not None and p.observed_at > latest]
    if bad:
        _refuse_dates(
            bad,
            f"are dated in the future (after {latest.isoformat()}: the time received plus "
            f"{skew.total_seconds():.0f} s of clock-skew allowance)",
            "send the time the outcome was observed, not a future date; leave observed_at out "
            "to use the time received (check the sender's clock)",
        )


def _check_after_score(
    resolved: list[tuple[str, _Item]], snapshots: dict[str, _Snapshot], skew: timedelta
) -> None:
    bad = [
        p
        for sid, p in resolved
        if p.observed_at is not None and p.observed_at < snapshots[sid][5] - skew
    ]
    if bad:
        first = next(sid for sid, p in resolved if p is bad[0])
        _refuse_dates(
            bad,
            f"are dated before the score they resolve was made (score {first} was made at "
            f"{snapshots[first][5].isoformat()}; {skew.total_seconds():.0f} s of clock-skew "
            "allowed)",
            "an outcome is observed after its score: check observed_at and which score the "
            "item names (score_id or key)",
        )


def _resolve(
    session: Session, model: RiskModel, parsed: list[_Item]
) -> tuple[list[tuple[str, _Item]], list[OutcomeItem], dict[str, _Snapshot]]:
    """Map each item to a stored score of ``model``; the rest are unknown.

    Look-ups by id use the primary key alone (the model is checked in Python): a condition on
    ``model_id`` could lead the planner onto the (model_id, created_at) index and a scan.
    """
    cols = (
        Score.id,
        Score.model_id,
        Score.key,
        Score.version_number,
        Score.eta,
        Score.se_eta,
        Score.probability,
        Score.created_at,
    )
    snapshots: dict[str, _Snapshot] = {}

    def collect(stmt: Any) -> None:
        for sid, model_id, *rest in session.execute(stmt):
            if model_id == model.id:
                snapshots[sid] = tuple(rest)

    ids = sorted({p.score_id for p in parsed if p.score_id is not None})
    for part in chunks(ids):
        collect(select(*cols).where(Score.id.in_(part)))
    keys = sorted({p.key for p in parsed if p.key is not None and p.score_id is None})
    for part in chunks(keys):
        collect(select(*cols).where(Score.model_id == model.id, Score.key.in_(part)))
    by_key = {snap[0]: sid for sid, snap in snapshots.items() if snap[0] is not None}
    resolved: list[tuple[str, _Item]] = []
    unknown: list[OutcomeItem] = []
    for p in parsed:
        sid = p.score_id if p.score_id is not None else by_key.get(str(p.key))
        reason = None
        if sid is None or sid not in snapshots:
            reason = "no score of this model has this score_id or key"
        elif p.key is not None and snapshots[sid][0] != p.key:
            reason = "score_id and key name different scores"
        if reason is None and sid is not None:
            resolved.append((sid, p))
        else:
            unknown.append(OutcomeItem(p.index, p.score_id, p.key, p.outcome, reason=reason))
    return resolved, unknown, snapshots


def _stored_outcomes(session: Session, score_ids: Sequence[str]) -> dict[str, int]:
    stored: dict[str, int] = {}
    for part in chunks(sorted(set(score_ids))):
        stmt = select(Outcome.score_id, Outcome.outcome).where(Outcome.score_id.in_(part))
        stored.update({sid: int(value) for sid, value in session.execute(stmt)})
    return stored


def _classify(
    resolved: list[tuple[str, _Item]], stored: dict[str, int], unknown: list[OutcomeItem]
) -> OutcomeResult:
    result = OutcomeResult(unknown=list(unknown))
    claimed = dict(stored)  # score id -> outcome that stands (stored, or first in this request)
    for sid, p in resolved:
        existing = claimed.get(sid)
        item = OutcomeItem(p.index, sid, p.key, p.outcome, existing=existing)
        if existing is None:
            claimed[sid] = p.outcome
            result.accepted.append(item)
        elif existing == p.outcome:
            result.duplicates.append(item)
        else:
            reason = "the score already has the other outcome; the first one stands"
            result.conflicts.append(
                OutcomeItem(p.index, sid, p.key, p.outcome, existing=existing, reason=reason)
            )
    result.unknown.sort(key=lambda u: u.index)
    return result


def get_outcome(*, session: Session, score_id: str) -> Outcome | None:
    """The outcome stored for ``score_id``, or None."""
    return session.scalar(select(Outcome).where(Outcome.score_id == score_id))
