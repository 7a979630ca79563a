"""Out-of-core fit benchmark: bounded peak memory on a Parquet file far larger than a block.

    python3 tests/benchmarks/bench_out_of_core.py               # 20,000,000 rows
    python3 tests/benchmarks/bench_out_of_core.py --rows 2000000 --subset 500000

Writes the seeded pipe-segment data (tests/scale/_data.py) to a temporary Parquet file in
slices of 500,000 rows (never whole in memory), then runs each measurement in a fresh
process (so ``ru_maxrss`` is that run's own peak): the streamed fit of the whole file
(streamed encoding + Newton passes), and on a subset the in-memory fit (the upload path:
whole table, encoding, design matrix, fit) and the streamed fit. Prints one table: rows,
file size, seconds, passes over the data, seconds per pass, peak RSS, and the ratio of the
streamed to the in-memory time on the same subset.
"""

from __future__ import annotations

import argparse
import multiprocessing as mp
import resource
import sys
import tempfile
import time
from pathlib import Path
from typing import Any

import pyarrow.parquet as pq

sys.path.insert(0, str(Path(__file__).resolve().parents[2]))

from tests.scale._data import SPEC_FEATURES, segments

OUT = ("outcome", "exposure", "log_length")


def write(path: Path, rows: int, slice_rows: int = 500_000) -> None:
    writer = None
    for k, lo in enumerate(range(0, rows, slice_rows)):
        t = segments(1000 + k, min(slice_rows, rows - lo))
        writer = writer or pq.ParquetWriter(path, t.schema)
        writer.write_table(t, row_group_size=100_000)
    assert writer is not None
    writer.close()


def _peak_mb() -> float:
    return resource.getrusage(resource.RUSAGE_SELF).ru_maxrss / 1024.0


def streamed(path: str, batch_rows: int) -> dict[str, Any]:
    from service.sources.blocks import file_blocks
    from service.sources.encoding import learn_streamed
    from service.sources.tables import TableSpec, chunks
    from service.stats.fit import fit_logistic_blocks

    base = _peak_mb()
    t0 = time.perf_counter()
    kinds = {f["name"]: f["kind"] for f in SPEC_FEATURES}
    se = learn_streamed(SPEC_FEATURES, lambda: chunks(TableSpec(path, kinds, *OUT), batch_rows))
    t_enc = time.perf_counter() - t0
    blocks = file_blocks(path, se.encoding, *OUT, batch_rows=batch_rows)
    calls = [0]

    def counted() -> Any:
        calls[0] += 1
        return blocks()

    t1 = time.perf_counter()
    fit = fit_logistic_blocks(counted, n_terms=len(se.encoding.term_names))
    t_fit = time.perf_counter() - t1
    passes = se.passes + calls[0]
    total = t_enc + t_fit
    return {
        "seconds": total,
        "passes": passes,
        "per_pass": total / passes,
        "peak_mb": _peak_mb(),
        "base_mb": base,
        "coef0": float(fit.coef[0]),
    }


def in_memory(path: str) -> dict[str, Any]:
    from service.data_io import table_columns, training_data
    from service.stats.design import design_matrix, learn_encoding
    from service.stats.fit import fit_logistic

    base = _peak_mb()
    t0 = time.perf_counter()
    kinds = {f["name"]: f["kind"] for f in SPEC_FEATURES}
    table = pq.read_table(path)
    data = training_data(
        table_columns(table, [*kinds, *OUT]),
        kinds=kinds,
        outcome=OUT[0],
        weights=OUT[1],
        offset=OUT[2],
    )
    enc = learn_encoding(SPEC_FEATURES, data.columns)
    X = design_matrix(enc, data.columns).X
    fit = fit_logistic(X, data.y, weights=data.weights, offset=data.offset)
    total = time.perf_counter() - t0
    return {
        "seconds": total,
        "passes": None,
        "per_pass": None,
        "peak_mb": _peak_mb(),
        "base_mb": base,
        "coef0": float(fit.coef[0]),
    }


def _run(fn: Any, *args: Any) -> dict[str, Any]:
    with mp.get_context("spawn").Pool(1) as pool:
        result: dict[str, Any] = pool.apply(fn, args)
    return result


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--rows", type=int, default=20_000_000)
    ap.add_argument("--subset", type=int, default=1_000_000)
    ap.add_argument("--batch-rows", type=int, default=65_536)
    args = ap.parse_args()
    with tempfile.TemporaryDirectory() as tmp:
        big, small = Path(tmp) / "big.parquet", Path(tmp) / "subset.parquet"
        t0 = time.perf_counter()
        write(big, args.rows)
        write(small, args.subset)
        print(f"wrote {args.rows:,} + {args.subset:,} rows in {time.perf_counter() - t0:.0f} s")
        mb = {p: p.stat().st_size / 2**20 for p in (big, small)}
        runs = [
            ("streamed", args.subset, mb[small], _run(streamed, str(small), args.batch_rows)),
            ("in-memory", args.subset, mb[small], _run(in_memory, str(small))),
            ("streamed", args.rows, mb[big], _run(streamed, str(big), args.batch_rows)),
        ]
    mem_time = runs[1][3]["seconds"]
    head = f"{'mode':<10} {'rows':>12} {'file MB':>9} {'seconds':>9} {'passes':>7} "
    print(head + f"{'s/pass':>8} {'peak RSS MB':>12} {'vs in-memory':>13}")
    for mode, rows, size, r in runs:
        ratio = r["seconds"] / mem_time * (args.subset / rows)
        print(
            f"{mode:<10} {rows:>12,} {size:>9.1f} {r['seconds']:>9.1f} "
            f"{r['passes'] or '-':>7} {r['per_pass'] or float('nan'):>8.2f} "
            f"{r['peak_mb']:>12.0f} {ratio:>12.2f}x"
        )
    print(
        f"(ratio: time per row against the in-memory fit of the {args.subset:,}-row subset; "
        f"batch_rows={args.batch_rows:,})"
    )


if __name__ == "__main__":
    main()
