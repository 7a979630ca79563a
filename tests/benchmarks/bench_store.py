"""Benchmark of the store's hot paths (run on demand, not collected by pytest).

    python3 -m tests.benchmarks.bench_store [--rows 1000000] [--url sqlite:////tmp/b.db | postgresql+psycopg://...]

Prints seconds for: bulk score logging (``add_scores``), outcome ingestion (``add_outcomes``) and
the calibration read (``scores_with_outcomes``), with the read compared to two peers measured in
the same run on the same rows: the same SELECT fetched as SQLAlchemy rows (``Result.all()``) and
as ORM objects (``select(Score, Outcome)``).
"""

from __future__ import annotations

import argparse
import os
import tempfile
import time
import uuid
from datetime import timedelta

import numpy as np
from sqlalchemy import insert, select

from models_store import (
    Outcome,
    Score,
    add_outcomes,
    add_scores,
    add_version,
    create_model,
    get_model,
    make_engine,
    make_session_factory,
    scores_with_outcomes,
    session_scope,
    upgrade,
    utcnow,
)
from tests.store.dbfixtures import fresh_postgres_url, version_fields


def _seed(url: str, n_rows: int) -> None:
    """n_rows scores with outcomes, inserted through Core in chunks (setup, not measured)."""
    engine = make_engine(url, sqlite_synchronous="NORMAL")
    factory = make_session_factory(engine)
    rng = np.random.default_rng(7)
    with session_scope(factory) as s:
        model = create_model(session=s, name="bench")
        add_version(session=s, model=model, **version_fields())
        model_id = model.id
    start = utcnow() - timedelta(days=365)
    chunk = 50_000
    for lo in range(0, n_rows, chunk):
        k = min(chunk, n_rows - lo)
        eta = rng.normal(-3.0, 1.0, size=k)
        ids = [str(uuid.uuid4()) for _ in range(k)]
        # times increase with insertion, as a live score log's do
        offsets = np.sort(rng.uniform(lo, lo + k, size=k)) * (3e7 / n_rows)
        at = [start + timedelta(seconds=float(x)) for x in offsets]
        y = (rng.uniform(size=k) < 1 / (1 + np.exp(-eta))).astype(int)
        with engine.begin() as conn:
            conn.execute(
                insert(Score.__table__),
                [
                    {
                        "id": ids[i],
                        "model_id": model_id,
                        "version_number": 1,
                        "key": None,
                        "inputs": {},
                        "eta": float(eta[i]),
                        "se_eta": 0.1,
                        "probability": float(1 / (1 + np.exp(-eta[i]))),
                        "created_at": at[i],
                    }
                    for i in range(k)
                ],
            )
            conn.execute(
                insert(Outcome.__table__),
                [
                    {
                        "score_id": ids[i],
                        "model_id": model_id,
                        "outcome": int(y[i]),
                        "observed_at": at[i] + timedelta(days=30),
                        "received_at": at[i],
                        "version_number": 1,
                        "eta": float(eta[i]),
                        "se_eta": 0.1,
                        "probability": float(1 / (1 + np.exp(-eta[i]))),
                        "scored_at": at[i],
                    }
                    for i in range(k)
                ],
            )
    engine.dispose()


def _timed(label: str, fn: object) -> float:
    start = time.perf_counter()
    fn()  # type: ignore[operator]
    elapsed = time.perf_counter() - start
    print(f"  {label:<48} {elapsed:8.3f} s")
    return elapsed


def run(url: str, n_rows: int, orm_peer: bool = False) -> None:
    upgrade(url)
    print(f"backend {url.split(':')[0]}, {n_rows:,} scores with outcomes")
    _seed(url, n_rows)
    engine = make_engine(url)
    factory = make_session_factory(engine)
    with session_scope(factory, read_only=True) as s:
        model = get_model(session=s, name="bench")
        assert model is not None
        ours = _timed(
            "scores_with_outcomes (columns -> numpy)",
            lambda: scores_with_outcomes(session=s, model=model),
        )
        assert scores_with_outcomes(session=s, model=model).n == n_rows
        # peer: the score-outcome join fetched as SQLAlchemy rows (what a plain query would do)
        join = (
            select(
                Score.eta,
                Score.se_eta,
                Score.probability,
                Outcome.outcome,
                Score.created_at,
                Outcome.observed_at,
                Score.version_number,
            )
            .join(Outcome, Outcome.score_id == Score.id)
            .where(Score.model_id == model.id)
            .order_by(Score.created_at)
        )
        rows = _timed("peer: score-outcome join as rows, .all()", lambda: s.execute(join).all())
        print(f"  ratio peer/ours {rows / ours:5.1f}x")
        if orm_peer:
            orm = (
                select(Score, Outcome)
                .join(Outcome, Outcome.score_id == Score.id)
                .where(Score.model_id == model.id)
            )
            objects = _timed(
                "peer: ORM objects select(Score, Outcome)", lambda: s.execute(orm).all()
            )
            print(f"  ratio orm/ours  {objects / ours:5.1f}x")
    log = [{"inputs": {"age": 50.0}, "eta": -2.0, "se_eta": 0.2, "probability": 0.12}] * 50_000
    ids: list[str] = []
    with session_scope(factory) as s:
        model = get_model(session=s, name="bench")
        assert model is not None
        _timed(
            "add_scores 50,000 rows",
            lambda: ids.extend(add_scores(session=s, model=model, version_number=1, rows=log)),
        )
    with session_scope(factory) as s:
        model = get_model(session=s, name="bench")
        assert model is not None
        items = [{"score_id": i, "outcome": 1} for i in ids]
        _timed(
            "add_outcomes 50,000 items", lambda: add_outcomes(session=s, model=model, items=items)
        )
    engine.dispose()


def main() -> None:
    parser = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    parser.add_argument("--rows", type=int, default=1_000_000)
    parser.add_argument("--url", default=None, help="empty database URL (default: temp SQLite)")
    parser.add_argument("--postgres", default=None, help="server URL: bench in a fresh database")
    parser.add_argument("--orm-peer", action="store_true", help="also time ORM objects (slow)")
    args = parser.parse_args()
    if args.postgres:
        with fresh_postgres_url(args.postgres) as url:
            run(url, args.rows, args.orm_peer)
        return
    with tempfile.TemporaryDirectory() as tmp:
        url = args.url or f"sqlite:///{os.path.join(tmp, 'bench.db')}"
        run(url, args.rows, args.orm_peer)


if __name__ == "__main__":
    main()
