"""Outcome ingestion: idempotent, conflicts reported and not written, safe under concurrency."""

from __future__ import annotations

import threading

import pytest
from sqlalchemy import func, select
from sqlalchemy.orm import Session, sessionmaker

from models_store import (
    Outcome,
    RiskModel,
    add_outcomes,
    add_scores,
    add_version,
    create_model,
    get_model,
    get_outcome,
)
from service.errors import DataError
from tests.store.dbfixtures import version_fields

ROW = {"inputs": {"age": 50.0}, "eta": -2.0, "se_eta": 0.2, "probability": 0.119}


def _score(session: Session, model: RiskModel, n: int, prefix: str = "k") -> list[str]:
    rows = [{**ROW, "key": f"{prefix}{i}"} for i in range(n)]
    ids = add_scores(session=session, model=model, version_number=1, rows=rows)
    session.commit()
    return ids


def _stored(session: Session) -> int:
    return int(session.scalar(select(func.count()).select_from(Outcome)) or 0)


def test_same_outcome_twice_counts_once(session: Session, model: RiskModel) -> None:
    ids = _score(session, model, 3)
    first = add_outcomes(
        session=session, model=model, items=[{"score_id": i, "outcome": 1} for i in ids]
    )
    session.commit()
    assert [a.index for a in first.accepted] == [0, 1, 2]
    again = add_outcomes(
        session=session,
        model=model,
        items=[{"score_id": ids[0], "outcome": 1}, {"key": "k1", "outcome": 1}],
    )
    session.commit()
    assert again.accepted == [] and [d.index for d in again.duplicates] == [0, 1]
    assert again.duplicates[1].score_id == ids[1] and again.duplicates[1].existing == 1
    assert _stored(session) == 3


def test_conflicting_outcome_is_reported_not_written(session: Session, model: RiskModel) -> None:
    ids = _score(session, model, 2)
    add_outcomes(session=session, model=model, items=[{"score_id": ids[0], "outcome": 0}])
    session.commit()
    result = add_outcomes(
        session=session,
        model=model,
        items=[
            {"score_id": ids[0], "outcome": 1},  # conflicts with the stored 0
            {"score_id": ids[1], "outcome": 1},  # new
            {"score_id": ids[1], "outcome": 0},  # conflicts with the item before it
            {"score_id": ids[1], "outcome": 1},  # duplicate of the item before
        ],
    )
    session.commit()
    assert [(c.index, c.existing) for c in result.conflicts] == [(0, 0), (2, 1)]
    assert [a.index for a in result.accepted] == [1]
    assert [d.index for d in result.duplicates] == [3]
    stored = get_outcome(session=session, score_id=ids[0])
    assert stored is not None and stored.outcome == 0
    assert stored.observed_at.tzinfo is not None and stored.received_at.tzinfo is not None


def test_unknown_scores_are_reported(session: Session, model: RiskModel) -> None:
    ids = _score(session, model, 1)
    other = create_model(session=session, name="other")
    add_version(session=session, model=other, **version_fields())
    (foreign,) = add_scores(session=session, model=other, version_number=1, rows=[ROW])
    session.commit()
    result = add_outcomes(
        session=session,
        model=model,
        items=[
            {"score_id": "00000000-0000-0000-0000-000000000000", "outcome": 1},
            {"key": "never-scored", "outcome": 0},
            {"score_id": foreign, "outcome": 1},  # another model's score
            {"score_id": ids[0], "key": "wrong-key", "outcome": 1},
            {"score_id": ids[0], "key": "k0", "outcome": 1},
        ],
    )
    session.commit()
    assert [u.index for u in result.unknown] == [0, 1, 2, 3]
    assert "different scores" in (result.unknown[3].reason or "")
    assert [a.index for a in result.accepted] == [4]
    assert _stored(session) == 1


@pytest.mark.parametrize(
    ("item", "field"),
    [
        ({"score_id": "x", "outcome": 2}, "outcomes[0].outcome"),
        ({"score_id": "x", "outcome": True}, "outcomes[0].outcome"),
        ({"score_id": "x", "outcome": None}, "outcomes[0].outcome"),
        ({"outcome": 1}, "outcomes[0]"),
    ],
)
def test_malformed_items_are_refused(
    session: Session, model: RiskModel, item: dict[str, object], field: str
) -> None:
    with pytest.raises(DataError) as info:
        add_outcomes(session=session, model=model, items=[item])
    assert info.value.field == field and info.value.remedy


def test_concurrent_ingestion_of_overlapping_batches(
    factory: sessionmaker[Session], session: Session, model: RiskModel
) -> None:
    """Four threads send overlapping batches (same outcomes, different orders): every score
    ends with exactly one outcome, and accepted counts add up to the number of scores."""
    ids = _score(session, model, 400)
    truth = {sid: i % 2 for i, sid in enumerate(ids)}
    batches = [ids[0:300], ids[100:400][::-1], ids[::2], ids[50:350]]
    accepted: list[int] = []
    errors: list[BaseException] = []
    barrier = threading.Barrier(len(batches))

    def ingest(batch: list[str]) -> None:
        try:
            barrier.wait()
            with factory() as s:
                m = get_model(session=s, name="pipes")
                assert m is not None
                items = [{"score_id": sid, "outcome": truth[sid]} for sid in batch]
                result = add_outcomes(session=s, model=m, items=items)
                s.commit()
                assert not result.conflicts and not result.unknown
                assert len(result.accepted) + len(result.duplicates) == len(batch)
                accepted.append(len(result.accepted))
        except BaseException as error:  # collected and re-raised in the main thread
            errors.append(error)

    threads = [threading.Thread(target=ingest, args=(b,)) for b in batches]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert errors == []
    assert sum(accepted) == len(ids)
    with factory() as s:
        rows = dict(s.execute(select(Outcome.score_id, Outcome.outcome)).tuples().all())
    assert rows == truth
