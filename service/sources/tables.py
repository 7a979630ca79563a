"""Stream the needed columns of a Parquet dataset or a CSV file as typed numpy chunks.

Reading is pyarrow's: ``pyarrow.dataset`` scans one Parquet file, a directory of Parquet
files (files in sorted path order) or CSV files, projecting only the named columns and
yielding record batches of at most ``batch_rows`` rows with read-ahead switched off, so the
memory of a pass is bounded by one batch (and one Parquet row group being decoded).
Every batch is converted by :func:`service.data_io.coerce_column` /
:func:`~service.data_io.coerce_outcome`, the same conversion an upload gets, with error
fields ``data.path[row].column`` counted from the first row of the dataset.

CSV columns are read with fixed types so that every block agrees: ``float64`` for numeric
and spline features, the outcome, weights and offset; text for categorical features (a
level written ``3`` stays ``"3"``; ``3.0`` stays ``"3.0"``).
"""

from __future__ import annotations

from collections.abc import Iterator, Mapping
from dataclasses import dataclass
from pathlib import Path

import numpy as np
import pyarrow as pa
import pyarrow.csv as pa_csv
import pyarrow.dataset as ds

from service.data_io import NUMERIC_KINDS, FieldNamer, coerce_column, coerce_outcome
from service.errors import DataError, MissingFeatureError

__all__ = ["BATCH_ROWS", "Chunk", "TableSpec", "chunks"]

BATCH_ROWS = 65_536
_CSV_SUFFIXES = (".csv", ".csv.gz", ".txt")


@dataclass(frozen=True)
class TableSpec:
    """Which file(s) and columns to read: ``kinds`` maps each feature to its kind."""

    path: str
    kinds: Mapping[str, str]
    outcome: str
    weights: str | None = None
    offset: str | None = None

    @property
    def columns(self) -> list[str]:
        extra = [c for c in (self.weights, self.offset) if c]
        return [*self.kinds, self.outcome, *extra]


@dataclass(frozen=True)
class Chunk:
    """Rows ``start .. start + n_obs - 1`` of the dataset, converted."""

    start: int
    n_obs: int
    columns: dict[str, np.ndarray]
    y: np.ndarray
    weights: np.ndarray | None
    offset: np.ndarray | None


def _is_csv(path: Path) -> bool:
    if path.is_dir():
        return any(p.name.lower().endswith(_CSV_SUFFIXES) for p in path.iterdir()) and not any(
            p.suffix.lower() == ".parquet" for p in path.iterdir()
        )
    return path.name.lower().endswith(_CSV_SUFFIXES)


def _dataset(spec: TableSpec, batch_rows: int) -> ds.Dataset:
    path = Path(spec.path)
    if not path.exists():
        raise DataError(
            f"no file or directory at {spec.path}",
            field="data.path",
            value=spec.path,
            remedy="give the path of a Parquet file, a directory of Parquet files or a CSV file",
        )
    try:
        if _is_csv(path):
            types = {c: pa.float64() for c in spec.columns}
            types.update({n: pa.string() for n, k in spec.kinds.items() if k not in NUMERIC_KINDS})
            fmt = ds.CsvFileFormat(
                convert_options=pa_csv.ConvertOptions(column_types=types),
                read_options=pa_csv.ReadOptions(block_size=max(batch_rows * 64, 1 << 16)),
            )
            return ds.dataset(str(path), format=fmt)
        return ds.dataset(str(path), format="parquet")
    except (pa.ArrowInvalid, OSError, ValueError) as exc:
        raise _unreadable(spec, exc) from exc


def _unreadable(spec: TableSpec, exc: Exception) -> DataError:
    first = str(exc).strip().splitlines()[0][:200] if str(exc).strip() else type(exc).__name__
    return DataError(
        f"the data at {spec.path} could not be read: {first}",
        field="data.path",
        value=spec.path,
        remedy="give a readable Parquet file or directory, or a UTF-8 CSV file with a header",
    )


def _check_columns(dataset: ds.Dataset, spec: TableSpec) -> None:
    present = set(dataset.schema.names)
    for name in spec.columns:
        if name not in present:
            raise MissingFeatureError(
                f"the data at {spec.path} have no column {name!r}",
                field=f"data.columns.{name}",
                value=name,
                remedy=f"add a column named {name}; the data have: "
                + ", ".join(sorted(present))[:300],
            )


def _namer(name: str, start: int) -> FieldNamer:
    return lambda i: f"data.path[{start + i}].{name}"


def _typed(values: np.ndarray) -> np.ndarray:
    """Text columns as fixed-width ``str`` arrays (vectorised level matching downstream)."""
    return values.astype(str) if values.dtype == object else values


def _numbers(batch: pa.RecordBatch, name: str, start: int) -> np.ndarray:
    return coerce_column(name, "numeric", batch.column(name), _namer(name, start))


def chunks(spec: TableSpec, batch_rows: int = BATCH_ROWS) -> Iterator[Chunk]:
    """One pass over the data: converted chunks of at most ``batch_rows`` rows, in order."""
    dataset = _dataset(spec, batch_rows)
    _check_columns(dataset, spec)
    scanner = dataset.scanner(
        columns=spec.columns,
        batch_size=batch_rows,
        batch_readahead=0,
        fragment_readahead=0,
        use_threads=False,
    )
    start = 0
    batches = scanner.to_batches()
    while True:
        try:
            batch = next(batches)
        except StopIteration:
            return
        except (pa.ArrowInvalid, OSError) as exc:
            raise _unreadable(spec, exc) from exc
        m = batch.num_rows
        if m == 0:
            continue
        cols = {
            name: _typed(coerce_column(name, kind, batch.column(name), _namer(name, start)))
            for name, kind in spec.kinds.items()
        }
        y = coerce_outcome(spec.outcome, batch.column(spec.outcome), _namer(spec.outcome, start))
        w = _numbers(batch, spec.weights, start) if spec.weights else None
        off = _numbers(batch, spec.offset, start) if spec.offset else None
        if w is not None and (w < 0).any():
            i = int(np.flatnonzero(w < 0)[0])
            raise DataError(
                f"weights column {spec.weights} has a negative value {w[i]:g}",
                field=f"data.path[{start + i}].{spec.weights}",
                value=float(w[i]),
                remedy="case weights must be >= 0",
            )
        yield Chunk(start, m, cols, y, w, off)
        start += m
