"""Stream the needed columns of a Parquet dataset or a CSV file as typed numpy chunks.

Reading is pyarrow's: ``pyarrow.dataset`` scans an explicit list of files (the checked
files of :func:`service.sources.paths.data_files`, in sorted path order; pyarrow never
lists a directory itself): Parquet files, or CSV files when every file is one, projecting
only the named columns and yielding record batches of at most ``batch_rows`` rows with
read-ahead switched off, so the memory of a pass is bounded by one batch (and one Parquet
row group being decoded, bounded from each file's footer by
:func:`service.sources.file_limits.check_parquet`: :func:`check_files`).

Errors name files relative to their allowed directory and never quote a file: a file pyarrow
cannot read is named with the kind of failure (and the row for CSV), not pyarrow's message,
which may hold a line of the file or an absolute path. Categorical text is normalised to
NFC (:func:`service.data_io.nfc_arrow`).
Every batch is converted by :func:`service.data_io.coerce_column` /
:func:`~service.data_io.coerce_outcome`, the same conversion an upload gets, with error
fields ``data.path[row].column`` counted from the first row of the dataset.

CSV columns are read with fixed types so that every block agrees: ``float64`` for numeric
and spline features, the outcome, weights and offset; text for categorical features (a
level written ``3`` stays ``"3"``; ``3.0`` stays ``"3.0"``).
"""

from __future__ import annotations

import re
from collections.abc import Iterator, Mapping
from dataclasses import dataclass

import numpy as np
import pyarrow as pa
import pyarrow.csv as pa_csv
import pyarrow.dataset as ds
import pyarrow.parquet as pq

from service.data_io import NUMERIC_KINDS, FieldNamer, coerce_column, coerce_outcome, nfc_arrow
from service.errors import DataError, MissingFeatureError

from .file_limits import ReadLimits, check_parquet
from .paths import DataFiles, files_under
from .upload_read import HEADER_BYTES, csv_header

__all__ = ["BATCH_ROWS", "Chunk", "TableSpec", "check_files", "chunks"]

BATCH_ROWS = 65_536
_CSV_SUFFIXES = (".csv", ".csv.gz", ".txt")


@dataclass(frozen=True)
class TableSpec:
    """Which file(s) and columns to read: ``kinds`` maps each feature to its kind.

    ``checked``: the files of ``path`` as checked against the allowed directories; without
    it, ``path``'s own directory is the one allowed directory (:func:`files_under`).
    """

    path: str
    kinds: Mapping[str, str]
    outcome: str
    weights: str | None = None
    offset: str | None = None
    checked: DataFiles | None = None

    @property
    def data(self) -> DataFiles:
        return self.checked if self.checked is not None else files_under(self.path)

    @property
    def shown(self) -> str:
        return self.checked.shown if self.checked is not None else self.path

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


def _is_csv(files: DataFiles) -> bool:
    csv = [f.lower().endswith(_CSV_SUFFIXES) for f in files.files]
    if any(csv) and not all(csv):
        raise DataError(
            f"the directory {files.shown} mixes CSV and other files",
            field="data.path",
            value=files.shown,
            remedy="keep one format per directory (Parquet files, or CSV files)",
        )
    return all(csv)


def _dataset(spec: TableSpec, batch_rows: int) -> ds.Dataset:
    files = spec.data
    try:
        if _is_csv(files):
            types = {c: pa.float64() for c in spec.columns}
            types.update({n: pa.string() for n, k in spec.kinds.items() if k not in NUMERIC_KINDS})
            fmt = ds.CsvFileFormat(
                convert_options=pa_csv.ConvertOptions(column_types=types),
                read_options=pa_csv.ReadOptions(block_size=max(batch_rows * 64, 1 << 16)),
            )
            return ds.dataset(list(files.files), format=fmt)
        return ds.dataset(list(files.files), format="parquet")
    except (pa.ArrowInvalid, OSError, ValueError) as exc:
        raise _unreadable(spec, exc) from exc


def _unreadable(spec: TableSpec, exc: Exception) -> DataError:
    """The failure's kind and (CSV) row, never pyarrow's text: it may quote the file."""
    text = str(exc)
    where = [f"{m.group(1)} {m.group(2)}" for m in re.finditer(r"(Row|column) #(\d+)", text)]
    if "CSV" in text:
        what = "CSV parse error"
    elif "arquet" in text:
        what = "Parquet read error"
    else:
        what = type(exc).__name__
    detail = f"{what}{' at ' + ', '.join(where[:2]) if where else ''}"
    return DataError(
        f"the data at {spec.shown} could not be read: {detail}",
        field="data.path",
        value=spec.shown,
        remedy="give a readable Parquet file or directory, or a UTF-8 CSV file with a header "
        "row and the same columns in every row",
    )


def _check_columns(dataset: ds.Dataset, spec: TableSpec) -> None:
    present = set(dataset.schema.names)
    for name in spec.columns:
        if name not in present:
            raise MissingFeatureError(
                f"the data at {spec.shown} have no column {name!r}",
                field=f"data.columns.{name}",
                value=name,
                remedy=f"add a column named {name} to the data (they have "
                f"{len(present)} columns), or remove it from the spec",
            )


def check_files(spec: TableSpec, limits: ReadLimits) -> None:
    """Refuse, before reading them, files over the limits: a Parquet file whose row groups
    decode over the budget or that has too many columns (its footer), a CSV file whose header
    row has too many columns."""
    files = spec.data
    if _is_csv(files):
        for path in files.files:
            with open(path, "rb") as f:
                csv_header(f.read(HEADER_BYTES), limits)
        return
    for path, name in zip(files.files, files.names, strict=True):
        try:
            pf = pq.ParquetFile(
                path,
                thrift_string_size_limit=limits.max_footer_bytes,
                thrift_container_size_limit=limits.max_footer_bytes,
            )
        except (pa.ArrowInvalid, OSError, ValueError) as exc:
            raise _unreadable(spec, exc) from exc
        with pf:
            check_parquet(pf, spec.columns, limits, whole=False, shown=name)


def _namer(name: str, start: int) -> FieldNamer:
    return lambda i: f"data.path[{start + i}].{name}"


def _typed(values: np.ndarray) -> np.ndarray:
    """Text columns as fixed-width ``str`` arrays (vectorised level matching downstream)."""
    return values.astype(str) if values.dtype == object else values


def _text(batch: pa.RecordBatch, name: str, kind: str) -> pa.Array:
    col = batch.column(name)
    return col if kind in NUMERIC_KINDS else nfc_arrow(col)


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
            name: _typed(coerce_column(name, kind, _text(batch, name, kind), _namer(name, start)))
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
