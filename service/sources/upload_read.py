"""An uploaded CSV or Parquet file as a pyarrow table, read within :class:`ReadLimits`.

Parquet (recognised by its ``PAR1`` magic or a ``.parquet`` name): the footer is checked
first (:func:`service.sources.file_limits.check_parquet`: footer size, columns, rows and
the decoded size of the columns read), then only the named columns are decoded, one row
group at a time, with the decoded bytes added up as they come (the read stops once they pass
``max_decoded_bytes``). Every text column read is a dictionary array, so a categorical
column is coded without materialising its strings (and a long repeated string costs its
length once, not once per row).

CSV: the header row is parsed first (at most :data:`HEADER_BYTES` bytes; columns at most
``max_columns``); rows are bounded before parsing by the number of line breaks (an upper
bound: a quoted line break counts too; counted only when the file's size divided by its
columns, a bound too, is not small enough) and the decoded size by ``rows * width`` over the
columns read plus the file's size (text decodes to at most its bytes); only the named
columns are converted (``include_columns``). Text columns of up to
:data:`CSV_DICTIONARY_LEVELS` distinct values come as dictionary arrays
(``auto_dict_encode``; numbers stay numbers, so a level written ``3.0`` still reads as
``"3"``).

A missing named column is a :class:`~service.errors.MissingFeatureError` naming the columns
the file has (the client's own file).
"""

from __future__ import annotations

import csv
import io
from collections.abc import Sequence

import pyarrow as pa
import pyarrow.csv as pa_csv
import pyarrow.parquet as pq

from service.errors import DataError, MissingFeatureError

from .file_limits import ReadLimits, check_decoded, check_parquet, footer_bytes, too_big

__all__ = ["CSV_DICTIONARY_LEVELS", "HEADER_BYTES", "csv_header", "read_table"]

CSV_DICTIONARY_LEVELS = 1000  # a CSV text column with more distinct values is read as plain text
HEADER_BYTES = 4 * 2**20  # the longest CSV header row read
_REMEDY = "upload a UTF-8 CSV file with one header row (comma separated), or a Parquet file"


def _unreadable(kind: str, exc: Exception, value: str) -> DataError:
    text = str(exc).strip()
    first = text.splitlines()[0][:200] if text else type(exc).__name__
    return DataError(
        f"the uploaded file could not be read as {kind}: {first}",
        field="data",
        value=value,
        remedy=_REMEDY,
    )


def _missing(name: str, present: Sequence[str]) -> MissingFeatureError:
    return MissingFeatureError(
        f"the uploaded file has no column {name!r}",
        field=f"data.columns.{name}",
        value=name,
        remedy=f"add a column named {name}; the file has: " + ", ".join(sorted(present))[:300],
    )


def _parquet(
    content: bytes, columns: Sequence[str] | None, limits: ReadLimits, shown: str
) -> pa.Table:
    footer = footer_bytes(content[-8:])
    if footer > limits.max_footer_bytes:
        raise too_big(
            "a Parquet footer of (bytes)",
            footer,
            limits.max_footer_bytes,
            "max_decoded_mb",
            "write the file with fewer columns or row groups",
        )
    budget = limits.max_footer_bytes
    pf = pq.ParquetFile(
        io.BytesIO(content),
        read_dictionary=None,
        thrift_string_size_limit=budget,
        thrift_container_size_limit=budget,
    )
    names = pf.schema_arrow.names
    wanted = list(names) if columns is None else list(dict.fromkeys(columns))
    for name in wanted:
        if name not in names:
            raise _missing(name, names)
    check_parquet(pf, wanted, limits, whole=True, shown=shown)
    text = [n for n in wanted if _is_text(pf.schema_arrow.field(n).type)]
    pf = pq.ParquetFile(
        io.BytesIO(content),
        read_dictionary=text or None,
        thrift_string_size_limit=budget,
        thrift_container_size_limit=budget,
    )
    parts: list[pa.Table] = []
    size = 0
    for g in range(pf.metadata.num_row_groups):
        part = pf.read_row_group(g, columns=wanted)
        size += part.nbytes
        check_decoded(size, limits)
        parts.append(part)
    if not parts:
        return pf.schema_arrow.empty_table().select(wanted)
    return pa.concat_tables(parts)


def _is_text(typ: pa.DataType) -> bool:
    return bool(
        pa.types.is_string(typ)
        or pa.types.is_large_string(typ)
        or pa.types.is_binary(typ)
        or pa.types.is_large_binary(typ)
    )


def csv_header(content: bytes, limits: ReadLimits) -> list[str]:
    """The header row's names (its first :data:`HEADER_BYTES` bytes), at most ``max_columns``."""
    ends = [i for i in (content.find(b"\n", 0, HEADER_BYTES), content.find(b"\r", 0, HEADER_BYTES))]
    end = min((i for i in ends if i >= 0), default=-1)
    if end < 0:
        if len(content) > HEADER_BYTES:
            raise DataError(
                f"the CSV file has no header row within its first {HEADER_BYTES} bytes",
                field="data",
                value=len(content),
                remedy=_REMEDY,
            )
        end = len(content)
    line = content[:end].decode("utf-8-sig", errors="replace")
    header = next(csv.reader([line]), [])
    if len(header) > limits.max_columns:
        raise too_big(
            "columns",
            len(header),
            limits.max_columns,
            "max_file_columns",
            "keep only the columns the fit needs in the file",
        )
    return header


def _line_breaks(content: bytes) -> int:
    """Line breaks: LF, CR LF or a lone CR (pyarrow's CSV reader accepts all three)."""
    return content.count(b"\n") + content.count(b"\r") - content.count(b"\r\n")


def _csv(
    content: bytes,
    columns: Sequence[str] | None,
    categorical: Sequence[str],
    limits: ReadLimits,
) -> pa.Table:
    header = csv_header(content, limits)
    wanted = list(header) if columns is None else list(dict.fromkeys(columns))
    missing = [n for n in wanted if n not in header]
    wanted = [n for n in wanted if n in header] or header[:1]  # a malformed file says so first
    cats = set(categorical)
    width = sum(4 if n in cats else 8 for n in wanted)
    rows = len(content) // max(len(header), 1)  # a row holds a byte per field at least
    if rows > limits.max_rows or rows * width + len(content) > limits.max_decoded_bytes:
        rows = _line_breaks(content) + (0 if content.endswith((b"\n", b"\r")) else 1) - 1
    if rows > limits.max_rows:
        raise too_big(
            "rows (line breaks after the header)",
            rows,
            limits.max_rows,
            "max_fit_rows",
            "fit on a sample, or split the data by period",
        )
    check_decoded(rows * width + len(content), limits)  # text decodes to at most its bytes
    convert = pa_csv.ConvertOptions(
        include_columns=wanted if columns is not None else None,
        auto_dict_encode=True,
        auto_dict_max_cardinality=CSV_DICTIONARY_LEVELS,
    )
    table = pa_csv.read_csv(io.BytesIO(content), convert_options=convert)
    check_decoded(table.nbytes, limits)
    if missing:
        raise _missing(missing[0], header)
    return table


def read_table(
    content: bytes,
    *,
    filename: str | None,
    content_type: str | None,
    categorical: Sequence[str] = (),
    columns: Sequence[str] | None = None,
    limits: ReadLimits | None = None,
) -> pa.Table:
    """The upload as a table of the named ``columns`` (all when None), within ``limits``."""
    limits = limits or ReadLimits()
    value = filename or content_type or ""
    if not content:
        raise DataError(
            "the uploaded file is empty",
            field="data",
            value=filename or "",
            remedy="upload a CSV file with a header row, or a Parquet file",
        )
    is_parquet = content[:4] == b"PAR1" or (filename or "").lower().endswith(".parquet")
    try:
        if is_parquet:
            return _parquet(content, columns, limits, filename or "the upload")
        return _csv(content, columns, categorical, limits)
    except (pa.ArrowInvalid, pa.ArrowTypeError, OSError, ValueError, csv.Error) as exc:
        raise _unreadable("Parquet" if is_parquet else "CSV", exc, value) from exc
