"""Benchmark: the calibration report and the drift view over 1,000,000 scored outcomes.

    python3 tests/benchmarks/bench_monitoring.py [--n 1000000] [--db /tmp/bench_monitoring.db]

Fills a fresh SQLite store through the repository functions (one version, n scores in bulk,
n outcomes), then times the domain operations ``calibration_view`` and ``drift_view`` (count
windows of n/20 records) and, as the peer measured in the same run, the columnar read alone
(``scores_with_outcomes``). Warm figures are best of 3. The first requests after a start
(fresh limit cache and snapshots, as in a new process) are timed with nothing stored (the
benchmark first deletes its model's ``cusum_limit`` and ``outcome_column_block`` rows: CUSUM
simulation + full read), with the limits stored, the first warm-up (full read, sealing the
column blocks), with the blocks stored and no warm-up, after a warm-up
(:mod:`service.monitoring.warm`, timed itself), and a report asked at the moment of the
start while the warm-up runs - best of 2 starts where repeated. Prints seconds and ratios to
the read.
"""

from __future__ import annotations

import argparse
import os
import time
import uuid
from collections.abc import Callable
from datetime import UTC, datetime, timedelta
from pathlib import Path
from typing import Any

import numpy as np
from scipy.special import expit
from sqlalchemy import delete

from models_store.champions import set_champion
from models_store.db import make_engine, make_session_factory, upgrade
from models_store.models import create_model, get_model
from models_store.orm import CusumLimitRecord, OutcomeColumnBlock
from models_store.outcomes import add_outcomes
from models_store.scores import add_score_batch, scores_with_outcomes
from models_store.versions import add_version
from service.config import Settings
from service.monitoring import LimitCache, OutcomeSnapshots, Window, calibration_view, drift_view
from service.monitoring.warm import Warmer, warm_models
from service.stats.psi import numeric_reference

FILL_BATCH = 50_000


def fill(url: str, n: int) -> None:
    """One model, one version, ``n`` scores and their outcomes, in bulk.

    Scores go through the store's columnar insert (``add_score_batch``), outcomes through
    ``add_outcomes`` (the same path as the HTTP route) in batches of :data:`FILL_BATCH`.
    Scores are spread over a year (one time per batch), outcomes observed 30 days later.
    """
    engine = make_engine(url)
    upgrade(engine)
    session = make_session_factory(engine)()
    rng = np.random.default_rng(0)
    age = rng.uniform(2, 110, n)
    eta = -3.2 + 0.02 * (age - 50)
    model = create_model(session=session, name="bench", description="")
    session.flush()
    add_version(
        session=session,
        model=model,
        spec={"features": [{"name": "age", "kind": "numeric"}]},
        encoding={},
        term_names=["intercept", "age"],
        coef=[-4.2, 0.02],
        cov=[[0.01, 0], [0, 1e-6]],
        fit_stats={},
        term_table={},
        method="mle",
        options={},
        training_ranges={},
        reference_distributions={"age": numeric_reference(rng.uniform(2, 110, 5000)).to_dict()},
        data_fingerprint="0" * 64,
        n_obs=5000,
        n_events=250.0,
        parent_number=None,
    )
    set_champion(session=session, model=model, number=1, reason="first version")
    session.commit()
    y = rng.random(n) < expit(eta + 0.1)
    t0 = datetime(2025, 1, 1, tzinfo=UTC)
    n_batches = max(1, -(-n // FILL_BATCH))
    for b, a in enumerate(range(0, n, FILL_BATCH)):
        z = min(n, a + FILL_BATCH)
        ids = [str(uuid.UUID(int=i + 1)) for i in range(a, z)]
        at = t0 + timedelta(days=365 * b / n_batches)
        _log_scores(session, model, ids, age[a:z], eta[a:z], at)
        session.commit()
        observed = at + timedelta(days=30)
        items = [
            {"score_id": s, "outcome": int(o), "observed_at": observed}
            for s, o in zip(ids, y[a:z].tolist(), strict=True)
        ]
        add_outcomes(session=session, model=model, items=items)
        session.commit()
    session.close()
    engine.dispose()


def _log_scores(
    session: Any, model: Any, ids: list[str], age: np.ndarray, eta: np.ndarray, at: datetime
) -> None:
    """One columnar score-log insert: inputs ``{"age": ...}``, SE of eta 0.05."""
    add_score_batch(
        session=session,
        model=model,
        version_number=1,
        ids=ids,
        keys=None,
        inputs_json=[f'{{"age": {v!r}}}' for v in age.tolist()],
        eta=eta.tolist(),
        se_eta=[0.05] * len(ids),
        probability=expit(eta).tolist(),
        created_at=at,
    )


def _has_bench_model(url: str) -> bool:
    engine = make_engine(url)
    try:
        upgrade(engine)
        with make_session_factory(engine)() as session:
            return get_model(session=session, name="bench") is not None
    finally:
        engine.dispose()


def best(fn: Callable[[], object], repeat: int = 3) -> float:
    times = []
    for _ in range(repeat):
        t = time.perf_counter()
        fn()
        times.append(time.perf_counter() - t)
    return min(times)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--n", type=int, default=1_000_000)
    ap.add_argument("--db", default=None, help="SQLite file (default /tmp/bench_monitoring_N.db)")
    ap.add_argument("--url", default=None, help="a fresh database URL instead (e.g. PostgreSQL)")
    ap.add_argument("--no-snapshot", action="store_true", help="read the store on every request")
    args = ap.parse_args()
    path = Path(args.db or f"/tmp/bench_monitoring_{args.n}.db")
    url = args.url or f"sqlite:///{path}"
    if not _has_bench_model(url):
        t = time.perf_counter()
        fill(url, args.n)
        print(f"filled {args.n:,} scores + outcomes in {time.perf_counter() - t:.1f} s")
    settings = Settings(database_url=url)
    engine = make_engine(url)
    factory = make_session_factory(engine)
    session = factory()
    from models_store.models import require_model

    model = require_model(session=session, name="bench")
    size = max(1000, args.n // 20)
    with_snapshot = not args.no_snapshot
    state: dict[str, Any] = {}

    def restart() -> None:
        """A new process's monitoring state: empty limit cache and snapshots. Overlap 0:
        the benchmark's rows are minutes old, and the warm-up seals only settled rows."""
        state["cache"] = LimitCache()
        state["snaps"] = OutcomeSnapshots(overlap=timedelta(0)) if with_snapshot else None

    def drift() -> object:
        return drift_view(
            session=session,
            model=model,
            window=Window(),
            by="count",
            size=size,
            settings=settings,
            cache=state["cache"],
            snapshots=state["snaps"],
        )

    def report() -> object:
        return calibration_view(
            session=session,
            model=model,
            window=Window(),
            settings=settings,
            snapshots=state["snaps"],
        )

    def warm_up() -> object:
        return warm_models(factory, state["snaps"], state["cache"], settings)

    def timed(fn: Callable[[], object]) -> float:
        t = time.perf_counter()
        fn()
        return time.perf_counter() - t

    def started(*steps: Callable[[], object]) -> tuple[float, ...]:
        """Best of 2 starts: each step timed in a new process's state."""
        runs = []
        for _ in range(2):
            restart()
            runs.append(tuple(timed(step) for step in steps))
        return min(runs, key=sum)

    print(f"load before: {_load()}")
    _forget(session, model)  # this benchmark's own file: nothing stored for monitoring
    restart()
    nothing = timed(drift)
    (limits_only,) = started(drift)
    figures = [("drift, nothing stored", nothing, "CUSUM simulation + full read"),
               ("drift, limits stored", limits_only, "full read")]  # fmt: skip
    if with_snapshot:
        restart()
        figures.append(("warm-up, first ever", timed(warm_up), "full read + sealing blocks"))
        r, d = started(report, drift)
        figures += [("report, blocks stored", r, "no warm-up"), ("drift, then", d, "")]
        w, r, d = started(warm_up, report, drift)
        figures += [("warm-up (background)", w, "not a request"),
                    ("report after warm-up", r, ""), ("drift after warm-up", d, "")]  # fmt: skip
        restart()
        warmer = Warmer(factory, state["snaps"], state["cache"], settings).start()
        figures.append(("report during warm-up", timed(report), "asked at the start"))
        warmer.stop()
    read = best(lambda: scores_with_outcomes(session=session, model=model))
    t_report = best(report)
    warm = best(drift)
    n = scores_with_outcomes(session=session, model=model).n
    mode = "in-memory snapshot" if with_snapshot else "a store read per request"
    print(f"n = {n:,} scored outcomes ({engine.url.render_as_string()}), {mode}")
    print(f"store columnar read (peer)    {read:7.3f} s   1.00 x")
    print(f"calibration report, warm      {t_report:7.3f} s   {t_report / read:5.2f} x read")
    print(
        f"drift view, warm              {warm:7.3f} s   {warm / read:5.2f} x read ({size:,}/window)"
    )
    print("first requests after a start (a new process's state; best of 2 where repeated):")
    for label, t, note in figures:
        print(f"  {label:27s} {t:7.3f} s   {t / read:5.2f} x read  {note}")
    if with_snapshot:
        snaps = state["snaps"]
        added = _add_outcomes(session, model, args.n, 10_000)
        t = timed(report)
        print(f"report after {added:,} new outcomes {t:7.3f} s   {t / read:5.2f} x read  "
              f"(incremental refresh; full reads so far: {snaps.full_reads})")  # fmt: skip
    print(f"load after: {_load()}")
    session.close()
    engine.dispose()


def _forget(session: Any, model: Any) -> None:
    """Delete the model's stored CUSUM limits and outcome blocks (this benchmark's file)."""
    for table in (CusumLimitRecord, OutcomeColumnBlock):
        session.execute(delete(table).where(table.model_id == model.id))
    session.commit()


def _load() -> str:
    one, five, fifteen = os.getloadavg()
    return f"{one:.2f} {five:.2f} {fifteen:.2f} (1/5/15 min) on {os.cpu_count()} CPUs"


def _add_outcomes(session: Any, model: Any, n: int, k: int) -> int:
    """Score ``k`` more records and store their outcomes (a concurrent ingester's work)."""
    ids = [str(uuid.uuid4()) for _ in range(k)]  # each run adds k more to the file
    _log_scores(session, model, ids, np.full(k, 50.0), np.full(k, -3.2), datetime.now(UTC))
    add_outcomes(
        session=session,
        model=model,
        items=[{"score_id": s, "outcome": int(i % 20 == 0)} for i, s in enumerate(ids)],
    )
    session.commit()
    return k


if __name__ == "__main__":
    main()
