"""Benchmark: the calibration report and the drift view over 1,000,000 scored outcomes.

    python3 tests/benchmarks/bench_monitoring.py [--n 1000000] [--db /tmp/bench_monitoring.db]

Fills a fresh SQLite store through the repository functions (one version, n scores in bulk,
n outcomes), then times the domain operations ``calibration_view`` and ``drift_view`` (count
windows of n/20 records) - cold (first CUSUM limit simulation) and warm (cached limit) - and,
as the peer measured in the same run, the columnar read alone (``scores_with_outcomes``).
Prints best-of-3 wall-clock seconds and each operation's ratio to the read.
"""

from __future__ import annotations

import argparse
import time
from collections.abc import Callable
from pathlib import Path

import numpy as np
from scipy.special import expit

from models_store.champions import set_champion
from models_store.db import make_engine, make_session_factory, upgrade
from models_store.models import create_model
from models_store.outcomes import add_outcomes
from models_store.scores import add_scores, scores_with_outcomes
from models_store.versions import add_version
from service.config import Settings
from service.monitoring import LimitCache, Window, calibration_view, drift_view
from service.stats.psi import numeric_reference


def fill(url: str, n: int) -> None:
    engine = make_engine(url)
    upgrade(engine)
    session = make_session_factory(engine)()
    rng = np.random.default_rng(0)
    age = rng.uniform(2, 110, n)
    eta = -3.2 + 0.02 * (age - 50)
    p = expit(eta)
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
    step = 100_000
    for a in range(0, n, step):
        rows = [
            {
                "inputs": {"age": float(age[i])},
                "eta": float(eta[i]),
                "se_eta": 0.05,
                "probability": float(p[i]),
            }
            for i in range(a, min(n, a + step))
        ]
        ids = add_scores(session=session, model=model, version_number=1, rows=rows)
        add_outcomes(
            session=session,
            model=model,
            items=[
                {"score_id": s, "outcome": int(o)}
                for s, o in zip(ids, y[a : a + step], strict=True)
            ],
        )
        session.commit()
    session.close()
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
    ap.add_argument("--db", default="/tmp/bench_monitoring.db")
    args = ap.parse_args()
    path = Path(args.db)
    url = f"sqlite:///{path}"
    if not path.exists():
        t = time.perf_counter()
        fill(url, args.n)
        print(f"filled {args.n:,} scores + outcomes in {time.perf_counter() - t:.1f} s")
    settings = Settings(database_url=url)
    engine = make_engine(url)
    session = make_session_factory(engine)()
    from models_store.models import require_model

    model = require_model(session=session, name="bench")
    cache = LimitCache()
    size = max(1000, args.n // 20)

    def drift() -> object:
        return drift_view(
            session=session,
            model=model,
            window=Window(),
            by="count",
            size=size,
            settings=settings,
            cache=cache,
        )

    t = time.perf_counter()
    drift()
    cold = time.perf_counter() - t
    read = best(lambda: scores_with_outcomes(session=session, model=model))
    report = best(
        lambda: calibration_view(session=session, model=model, window=Window(), settings=settings)
    )
    warm = best(drift)
    n = scores_with_outcomes(session=session, model=model).n
    print(f"n = {n:,} scored outcomes (SQLite file {path})")
    print(f"columnar read (peer)      {read:7.3f} s   1.00 x")
    print(f"calibration report        {report:7.3f} s   {report / read:5.2f} x read")
    print(f"drift view, warm limits   {warm:7.3f} s   {warm / read:5.2f} x read  ({size:,}/window)")
    print(
        f"drift view, cold limits   {cold:7.3f} s   {cold / read:5.2f} x read  (CUSUM simulation)"
    )
    session.close()
    engine.dispose()


if __name__ == "__main__":
    main()
