"""The score log: bulk insert, duplicate keys refused with nothing written, columnar reads."""

from __future__ import annotations

import time
from datetime import UTC, datetime, timedelta

import numpy as np
import orjson
import pytest
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from models_store import (
    RiskModel,
    Score,
    add_outcomes,
    add_scores,
    add_version,
    count_scores,
    create_model,
    find_scores_by_keys,
    get_score,
    get_scores,
    score_inputs,
    scores_with_outcomes,
)
from models_store.scores import (
    ScoreBatch,
    checkpoint_wal,
    insert_fresh_scores,
    insert_score_params,
    new_score_id,
    score_rows_params,
)
from service.errors import DuplicateKeyError, VersionNotFoundError
from tests.store.dbfixtures import version_fields

T0 = datetime(2025, 3, 1, tzinfo=UTC)


def _rows(n: int, seed: int = 0, key_prefix: str | None = None) -> list[dict[str, object]]:
    rng = np.random.default_rng(seed)
    eta = rng.normal(-2.5, 1.0, size=n)
    se = rng.uniform(0.05, 0.4, size=n)
    return [
        {
            "key": None if key_prefix is None else f"{key_prefix}{i}",
            "inputs": {"age": float(40 + i % 50), "material": "cast iron"},
            "eta": float(eta[i]),
            "se_eta": float(se[i]),
            "probability": float(1.0 / (1.0 + np.exp(-eta[i]))),
        }
        for i in range(n)
    ]


def _count(session: Session) -> int:
    return int(session.scalar(select(func.count()).select_from(Score)) or 0)


def test_scores_are_logged_and_found(session: Session, model: RiskModel) -> None:
    rows = _rows(5, key_prefix="seg-")
    ids = add_scores(session=session, model=model, version_number=1, rows=rows, created_at=T0)
    session.commit()
    assert len(ids) == len(set(ids)) == 5 and all(len(i) == 36 for i in ids)
    stored = get_score(session=session, model=model, score_id=ids[2])
    assert stored is not None
    assert stored.key == "seg-2" and stored.inputs == rows[2]["inputs"]
    assert stored.eta == rows[2]["eta"] and stored.created_at == T0
    assert set(get_scores(session=session, model=model, score_ids=[*ids, "nope"])) == set(ids)
    assert set(find_scores_by_keys(session=session, model=model, keys=["seg-0", "x"])) == {"seg-0"}
    other = create_model(session=session, name="other")
    assert get_score(session=session, model=other, score_id=ids[0]) is None


def test_duplicate_keys_are_refused_before_anything_is_written(
    session: Session, model: RiskModel
) -> None:
    add_scores(session=session, model=model, version_number=1, rows=_rows(3, key_prefix="k"))
    session.commit()
    before = _count(session)
    again = _rows(4, seed=1, key_prefix="new")
    again[3]["key"] = "k1"  # already stored
    with pytest.raises(DuplicateKeyError) as info:
        add_scores(session=session, model=model, version_number=1, rows=again)
    assert info.value.details["keys"] == ["k1"]
    assert info.value.details["indices"] == [3]
    assert info.value.field == "records[3].key"
    repeated = _rows(3, seed=2, key_prefix="r")
    repeated[2]["key"] = "r0"  # twice in one request
    with pytest.raises(DuplicateKeyError) as twice:
        add_scores(session=session, model=model, version_number=1, rows=repeated)
    assert twice.value.details == {"keys": ["r0"], "indices": [0, 2]}
    session.commit()
    assert _count(session) == before == 3


def test_scores_need_an_existing_version(session: Session, model: RiskModel) -> None:
    with pytest.raises(VersionNotFoundError):
        add_scores(session=session, model=model, version_number=2, rows=_rows(1))
    assert _count(session) == 0


def test_keys_are_unique_per_model_not_globally(session: Session, model: RiskModel) -> None:
    other = create_model(session=session, name="other")
    add_version(session=session, model=other, **version_fields())
    add_scores(session=session, model=model, version_number=1, rows=_rows(2, key_prefix="k"))
    add_scores(session=session, model=other, version_number=1, rows=_rows(2, key_prefix="k"))
    session.commit()
    assert _count(session) == 4


def test_scores_with_outcomes_returns_aligned_columns(session: Session, model: RiskModel) -> None:
    add_version(session=session, model=model, **version_fields(parent_number=1))
    rows = _rows(6)
    # one score at a time, each at its own time: scores 0-2 by version 1, 3-5 by version 2
    created = [T0 + timedelta(days=0 if i < 3 else 10, minutes=i) for i in range(6)]
    ids = [
        add_scores(
            session=session,
            model=model,
            version_number=1 if i < 3 else 2,
            rows=[rows[i]],
            created_at=created[i],
        )[0]
        for i in range(6)
    ]
    observed = [T0 + timedelta(days=40 + i) for i in range(6)]
    items = [
        {"score_id": sid, "outcome": i % 2, "observed_at": observed[i]}
        for i, sid in enumerate(ids)
        if i != 4  # score 4 has no outcome yet
    ]
    add_outcomes(session=session, model=model, items=items)
    session.commit()

    cols = scores_with_outcomes(session=session, model=model)
    assert cols.n == 5
    keep = [0, 1, 2, 3, 5]
    np.testing.assert_allclose(cols.eta, [rows[i]["eta"] for i in keep], rtol=0, atol=0)
    np.testing.assert_allclose(cols.se_eta, [rows[i]["se_eta"] for i in keep], rtol=0, atol=0)
    np.testing.assert_allclose(cols.probability, [rows[i]["probability"] for i in keep], rtol=0)
    assert cols.outcome.tolist() == [0, 1, 0, 1, 1] and cols.outcome.dtype == np.int8
    assert cols.version.tolist() == [1, 1, 1, 2, 2]
    want_created = np.array([created[i].replace(tzinfo=None) for i in keep], dtype="datetime64[us]")
    assert (cols.created_at == want_created).all()
    want_observed = np.array(
        [observed[i].replace(tzinfo=None) for i in keep], dtype="datetime64[us]"
    )
    assert (cols.observed_at == want_observed).all()

    by_score = scores_with_outcomes(
        session=session, model=model, since=T0 + timedelta(days=1), on="score"
    )
    assert by_score.version.tolist() == [2, 2]
    by_outcome = scores_with_outcomes(
        session=session, model=model, since=observed[1], until=observed[3], on="outcome"
    )
    assert by_outcome.outcome.tolist() == [1, 0]  # items 1 and 2, half-open window
    late_first = scores_with_outcomes(session=session, model=model, on="outcome")
    assert np.all(np.diff(late_first.observed_at.astype(np.int64)) >= 0)
    assert scores_with_outcomes(session=session, model=model, version=1).n == 3
    empty = scores_with_outcomes(session=session, model=model, since=T0 + timedelta(days=999))
    assert empty.n == 0 and empty.eta.dtype == np.float64
    assert count_scores(session=session, model=model) == 6
    assert count_scores(session=session, model=model, version=2) == 3
    assert len(score_inputs(session=session, model=model, limit=4)) == 4


def test_bulk_insert_of_50000_scores(session: Session, model: RiskModel) -> None:
    """Timing is printed, not asserted (run with -s to see it)."""
    rows = _rows(50_000, key_prefix="bulk-")
    start = time.perf_counter()
    ids = add_scores(session=session, model=model, version_number=1, rows=rows)
    session.commit()
    elapsed = time.perf_counter() - start
    dialect = session.get_bind().dialect.name
    print(f"\n[{dialect}] add_scores 50,000 rows + commit: {elapsed:.2f} s")
    assert len(ids) == 50_000 and _count(session) == 50_000


def test_fresh_and_merged_inserts_store_what_add_scores_stores(
    session: Session, model: RiskModel
) -> None:
    # The same rows through add_scores (ORM-free dict rows, the reference), the batch insert
    # with its constants in the statement (insert_fresh_scores) and the merged 9-value rows
    # (score_rows_params + insert_score_params): identical stored columns.
    rows = _rows(305, seed=4)  # 3 multi-row statements and 5 single rows on SQLite
    ids = [new_score_id() for _ in rows]
    eta, se, p = ([float(r[c]) for r in rows] for c in ("eta", "se_eta", "probability"))  # type: ignore[arg-type]

    def batch(prefix: str) -> ScoreBatch:
        return ScoreBatch(
            version_number=1,
            ids=[prefix + i[1:] for i in ids],
            keys=None,
            inputs_json=[orjson.dumps(r["inputs"]).decode() for r in rows],
            eta=eta,
            se_eta=se,
            probability=p,
            created_at=T0,
        )

    add_scores(
        session=session,
        model=model,
        version_number=1,
        rows=[{**r, "id": f"a{i[1:]}"} for r, i in zip(rows, ids, strict=True)],
        created_at=T0,
    )
    insert_fresh_scores(session=session, model_id=model.id, **batch("b"))
    params = score_rows_params(dialect=session.get_bind().dialect, model_id=model.id, **batch("c"))
    insert_score_params(session=session, params=params)
    session.commit()
    checkpoint_wal(session)  # SQLite: the log copied into the database file; else a no-op
    stored = {s.id: s for s in session.scalars(select(Score))}
    assert len(stored) == 3 * len(rows)
    for i in ids:
        a, b, c = (stored[p + i[1:]] for p in "abc")
        for s in (b, c):
            assert (s.model_id, s.version_number, s.key, s.created_at) == (
                a.model_id,
                a.version_number,
                a.key,
                a.created_at,
            )
            assert (s.inputs, s.eta, s.se_eta, s.probability) == (
                a.inputs,
                a.eta,
                a.se_eta,
                a.probability,
            )
    assert count_scores(session=session, model=model, since=T0) == 3 * len(rows)
