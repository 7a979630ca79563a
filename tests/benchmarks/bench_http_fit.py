"""Benchmark: an end-to-end HTTP fit of a 1,000,000-row file against statsmodels in process.

Run on demand (not collected by pytest):

    python3 tests/benchmarks/bench_http_fit.py                # n = 1,000,000 rows
    python3 tests/benchmarks/bench_http_fit.py --n 200000 --formats parquet

A live ``riskfit serve --no-auth`` on 127.0.0.1 (SQLite file) receives the seeded segments
data (5 features: numeric, log-transformed numeric, two categoricals; 10 terms) as a Parquet
and as a CSV upload (multipart/form-data); each request reads the file, validates and encodes
it, fits by maximum likelihood with the covariance, stores a new version and answers 201.
The peer, measured in the same run: statsmodels ``Logit(y, X).fit(method="newton")`` on the
design matrix already in memory (built here with pandas, not with riskfit), i.e. without any
reading, parsing or storing. The coefficients must agree to 1e-8.

Where the time of the best request per format goes is printed from the server's
``Server-Timing`` response header (milliseconds per step: read = multipart body and file
parsing, validate = typed columns and limits, encode = levels and design matrix, fit = Newton
and covariance, inference = term table and drop-term LR tests, summaries = fit statistics,
drift baselines and fingerprint, store = the version's commit, answer = the response dict);
"other" is the client-measured time minus their sum (HTTP transfer, routing, JSON response).

On a shared machine wall times swing with the load, so the CPU seconds spent are printed too
(the server process's user + system time over the best request, from ``/proc/<pid>/stat``; for
statsmodels the benchmark process's ``time.process_time()``, all threads counted). They are a
load-robust diagnostic, not the target, which is about wall time.

Absolute figures depend on the machine and its load; read the ratio.
"""

from __future__ import annotations

import argparse
import io
import json
import os
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import numpy as np

ROOT = Path(__file__).resolve().parents[2]
sys.path.insert(0, str(ROOT))

from tests.api._data import MATERIALS, SOILS, SPEC, segments  # noqa: E402
from tests.benchmarks.bench_scoring import Server  # noqa: E402


def _design(cols: dict[str, Any], names: list[str]) -> np.ndarray:
    """The design matrix built with pandas (intercept, age, log diameter, dummies, breaks)."""
    import pandas as pd

    df = pd.DataFrame(cols)
    X = pd.DataFrame({"intercept": 1.0, "age_years": df["age_years"].astype(float)})
    X["diameter_mm"] = np.log(df["diameter_mm"].astype(float))
    for feat, levels in (("material", MATERIALS), ("soil", SOILS)):
        for level in levels:
            X[f"{feat}={level}"] = (df[feat] == level).astype(float)
    X["prior_breaks_5y"] = df["prior_breaks_5y"].astype(float)
    return X[names].to_numpy()


def _files(cols: dict[str, Any]) -> dict[str, bytes]:
    import pyarrow as pa
    import pyarrow.csv as pa_csv
    import pyarrow.parquet as pq

    table = pa.table(cols)
    parquet, csv = io.BytesIO(), io.BytesIO()
    pq.write_table(table, parquet)
    pa_csv.write_csv(table, csv)
    return {"parquet": parquet.getvalue(), "csv": csv.getvalue()}


def _server_timing(header: str) -> dict[str, float]:
    """``name;dur=ms, ...`` to seconds per step name (in the header's order)."""
    out: dict[str, float] = {}
    for item in filter(None, (part.strip() for part in header.split(","))):
        name, _, dur = item.partition(";dur=")
        out[name] = float(dur) / 1e3
    return out


def _cpu_seconds(pid: int) -> float:
    """User + system CPU time of process ``pid`` (all its threads), from /proc."""
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__, formatter_class=argparse.RawTextHelpFormatter)
    ap.add_argument("--n", type=int, default=1_000_000)
    ap.add_argument("--formats", default="parquet,csv")
    ap.add_argument("--repeat", type=int, default=2, help="best of this many fits per format")
    args = ap.parse_args()
    import httpx
    import statsmodels.api as sm

    print(f"machine: {os.cpu_count()} cores, load average {os.getloadavg()[0]:.2f}")
    cols = segments(args.n, seed=17)
    files = _files(cols)
    tmp = Path(tempfile.mkdtemp(prefix="bench-http-fit-"))
    server = Server(f"sqlite:///{tmp}/fit.db", 1, tmp / "server.log")
    results: dict[str, float] = {}
    splits: dict[str, dict[str, float]] = {}
    cpu: dict[str, float] = {}
    coef: np.ndarray | None = None
    names: list[str] = []
    try:
        client = httpx.Client(base_url=server.url, timeout=600)
        for fmt in args.formats.split(","):
            best = np.inf
            for _ in range(args.repeat):
                c0, t0 = _cpu_seconds(server.proc.pid), time.perf_counter()
                r = client.post(
                    "/risk-models/bench-fit/versions",
                    data={"spec": json.dumps(SPEC)},
                    files={"data": (f"segments.{fmt}", files[fmt], "application/octet-stream")},
                )
                took = time.perf_counter() - t0
                spent = _cpu_seconds(server.proc.pid) - c0
                assert r.status_code == 201, r.text[:500]
                if took < best:
                    best, splits[fmt] = took, _server_timing(r.headers.get("server-timing", ""))
                cpu[fmt] = min(cpu.get(fmt, np.inf), spent)
            results[fmt] = best
            terms = r.json()["term_table"]["terms"]
            names = [t["name"] for t in terms]
            coef = np.array([t["estimate"] for t in terms])
    finally:
        server.stop()
    X = _design(cols, names)
    y = np.asarray(cols["outcome"], dtype=np.float64)
    c0, t0 = time.process_time(), time.perf_counter()
    ref = sm.Logit(y, X).fit(method="newton", tol=1e-12, maxiter=100, disp=0)
    _ = ref.bse  # the covariance, as riskfit returns it
    t_sm_cov = time.perf_counter() - t0
    cpu_sm = time.process_time() - c0
    assert coef is not None
    diff = float(np.max(np.abs(coef - ref.params) / np.maximum(1.0, np.abs(ref.params))))
    print(f"data: n={args.n:,} rows, {X.shape[1]} terms")
    for fmt, size in ((f, len(files[f])) for f in results):
        print(f"  upload size {fmt:8s} {size / 2**20:8.1f} MiB")
    print(f"  {'':<58s} {'seconds':>8s} {'vs statsmodels':>15s}")
    print(f"  {'statsmodels Logit newton, arrays in memory, with covariance':<58s} {t_sm_cov:8.2f}")
    for fmt, t in results.items():
        label = f"riskfit HTTP: upload {fmt}, parse, encode, fit, store, 201"
        print(f"  {label:<58s} {t:8.2f} {t_sm_cov / t:14.2f}x")
    print(
        f"  CPU seconds: statsmodels {cpu_sm:.2f}; "
        + ", ".join(
            f"riskfit server {fmt} {c:.2f} (least of {args.repeat})" for fmt, c in cpu.items()
        )
    )
    for fmt, split in splits.items():
        other = results[fmt] - sum(split.values())
        steps = ", ".join(f"{k} {v:.2f}" for k, v in {**split, "other": other}.items())
        print(f"  time split {fmt:8s} (s): {steps}")
    print(f"max coef difference vs statsmodels: {diff:.2e} (agreement to 1e-8: {diff <= 1e-8})")
    met = all(t < t_sm_cov for t in results.values())
    verdict = "met" if met else "NOT met"
    print(f"target (every HTTP fit faster than statsmodels in process): {verdict}")


if __name__ == "__main__":
    main()
