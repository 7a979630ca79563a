"""Domain operation: join observed outcomes back to logged scores.

Every item of a batch lands in exactly one list (the store decides, see
:func:`models_store.outcomes.add_outcomes`):

* ``accepted``   - stored now;
* ``duplicates`` - the score already has this same outcome (stored before, or earlier in the
  batch): counted once, nothing changes;
* ``conflicts``  - the score already has the *other* outcome: refused, the first one stands;
* ``unknown``    - no score of this model has that ``score_id`` / ``key``.

The accepted rows are committed before the answer is built, so an acknowledged outcome is in
the store when the client reads the answer. The HTTP status is chosen by
:func:`outcome_status` (documented in the route's OpenAPI description).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from datetime import timedelta
from typing import Any

from sqlalchemy.orm import Session

from models_store.orm import RiskModel
from models_store.outcomes import CLOCK_SKEW, OutcomeItem, OutcomeResult, add_outcomes

__all__ = ["ingest_outcomes", "outcome_status"]

_LISTS = ("accepted", "duplicates", "conflicts", "unknown")


def _item(item: OutcomeItem) -> dict[str, Any]:
    out: dict[str, Any] = {
        "index": item.index,
        "score_id": item.score_id,
        "key": item.key,
        "outcome": item.outcome,
    }
    if item.existing is not None:
        out["stored_outcome"] = item.existing
    if item.reason is not None:
        out["reason"] = item.reason
    return out


def outcome_status(counts: Mapping[str, int]) -> int:
    """200 all accepted/duplicate; 207 mixed; 409 nothing stood and some conflict; 404 all unknown.

    "Stood" means accepted or duplicate (the outcome the client sent is the stored one).
    """
    stood = counts["accepted"] + counts["duplicates"]
    refused = counts["conflicts"] + counts["unknown"]
    if refused == 0:
        return 200
    if stood > 0:
        return 207
    return 409 if counts["conflicts"] > 0 else 404


def _error(result: OutcomeResult, status: int) -> dict[str, Any] | None:
    if status == 409:
        first = result.conflicts[0]
        return {
            "code": "outcome_conflict",
            "message": f"{len(result.conflicts)} outcome(s) contradict stored outcomes; "
            "nothing was stored",
            "field": f"outcomes[{first.index}].outcome",
            "value": first.outcome,
            "remedy": "an outcome is final once stored; check the record, or send it for "
            "its own score",
        }
    if status == 404:
        first = result.unknown[0]
        return {
            "code": "score_not_found",
            "message": f"none of the {len(result.unknown)} outcome(s) names a score of this model",
            "field": f"outcomes[{first.index}].{'score_id' if first.score_id else 'key'}",
            "value": first.score_id or first.key,
            "remedy": "use the score_id returned by POST .../scores, or the record's key",
        }
    return None


def ingest_outcomes(
    *,
    session: Session,
    model: RiskModel,
    items: Sequence[Mapping[str, Any]],
    clock_skew: timedelta = CLOCK_SKEW,
) -> tuple[int, dict[str, Any]]:
    """Store the outcomes of ``items``; returns ``(http_status, answer body)`` after commit.

    A batch with an impossible ``observed_at`` (in the future beyond ``clock_skew``, or before
    its score was made) is refused whole before anything is written (422)."""
    result = add_outcomes(session=session, model=model, items=items, clock_skew=clock_skew)
    session.commit()  # acknowledged means stored
    counts = {name: len(getattr(result, name)) for name in _LISTS}
    status = outcome_status(counts)
    body: dict[str, Any] = {
        "model": model.name,
        "n_items": len(items),
        "counts": counts,
        **{name: [_item(i) for i in getattr(result, name)] for name in _LISTS},
    }
    error = _error(result, status)
    if error is not None:
        body["error"] = error
    return status, body
