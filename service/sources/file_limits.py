"""Bounds on what reading a data file may cost, judged from the file before decoding it.

A Parquet file declares in its footer the rows of each row group and, per column chunk,
the size of its pages before compression. A small file can declare a great deal (a column
of one repeated long string compresses a thousandfold), so an upload or a server-side file
is checked against its footer before any page is decoded:

* the footer itself: at most ``max_decoded_bytes / 16`` bytes (the footer is parsed into
  objects several times its size), and at most ``max_columns`` leaf columns;
* rows: at most ``max_rows`` (an upload; a server-side file is streamed);
* the columns read (only those the spec names) must be flat (no lists or structs);
* decoded bytes, estimated per row group as the sum over the columns read of
  ``rows * width`` (the Arrow width of a value: 8 for float64/int64, 4 for the dictionary
  index of a text column, which is always read as a dictionary) plus, for text, the chunk's
  uncompressed size (its dictionary and values can be no larger): at most
  ``max_decoded_bytes`` in total for an upload (held in memory whole), per row group for a
  server-side file (decoded one row group at a time).

The estimate is trusted only as far as the file's footer is honest: reading also adds up
the bytes actually decoded, row group by row group, and stops once they pass the budget
(:func:`check_decoded`). Errors are :class:`~service.errors.LimitExceededError` (422) naming
the setting and the remedy; they never quote the file.
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import pyarrow as pa
import pyarrow.parquet as pq

from service.errors import DataError, LimitExceededError

__all__ = ["ReadLimits", "check_decoded", "check_parquet", "footer_bytes", "too_big"]

_MB = 2**20


@dataclass(frozen=True)
class ReadLimits:
    """What one fit may read (defaults: the settings' defaults, service/config.py)."""

    max_rows: int = 20_000_000
    max_columns: int = 10_000
    max_decoded_bytes: int = 1024 * _MB

    @classmethod
    def from_settings(cls, settings: Any) -> ReadLimits:
        return cls(
            max_rows=settings.max_fit_rows,
            max_columns=settings.max_file_columns,
            max_decoded_bytes=settings.max_decoded_mb * _MB,
        )

    @property
    def max_footer_bytes(self) -> int:
        return max(self.max_decoded_bytes // 16, 64 * 1024)


def too_big(what: str, size: int, limit: int, setting: str, remedy: str) -> LimitExceededError:
    """422 for data over a read limit (``field="data"``; 413 is for the body's bytes)."""
    env = f"RISKFIT_{setting.upper()}"
    return LimitExceededError(
        f"the data hold {what} {size}; the limit is {limit}",
        field="data",
        value=size,
        remedy=f"{remedy} (an operator may raise {env})",
        details={"limit": limit, "setting": setting},
    )


def _decoded_too_big(size: int, limits: ReadLimits, scope: str) -> LimitExceededError:
    mb = limits.max_decoded_bytes // _MB
    return too_big(
        f"{scope} that decode to about (MB)",
        -(-size // _MB),
        mb,
        "max_decoded_mb",
        "read fewer columns, fit on a sample or split the data by period; a server-side "
        "Parquet file may instead be rewritten with smaller row groups",
    )


def footer_bytes(tail: bytes) -> int:
    """The footer length a Parquet file's last 8 bytes declare (``<len:u32 LE>PAR1``)."""
    if len(tail) < 8 or tail[-4:] != b"PAR1":
        return -1
    return int.from_bytes(tail[-8:-4], "little")


def _width(typ: pa.DataType) -> tuple[int, bool]:
    """(bytes per value as read, whether the chunk's own bytes add to it)."""
    if pa.types.is_string(typ) or pa.types.is_large_string(typ) or pa.types.is_binary(typ):
        return 4, True  # read as a dictionary: int32 index + the dictionary values
    if pa.types.is_large_binary(typ) or pa.types.is_dictionary(typ):
        return 8, True
    if pa.types.is_boolean(typ):
        return 1, False
    try:
        return max(typ.bit_width // 8, 1), False
    except ValueError:
        return 8, True


def check_parquet(
    pf: pq.ParquetFile,
    columns: Sequence[str],
    limits: ReadLimits,
    *,
    whole: bool,
    shown: str,
) -> None:
    """Refuse ``pf`` from its footer alone (see the module docstring).

    ``whole``: the file is held in memory at once (an upload; rows are bounded and the
    decoded estimate is summed over row groups), else streamed (per row group).
    """
    md = pf.metadata
    if md.num_columns > limits.max_columns:
        raise too_big(
            "columns",
            md.num_columns,
            limits.max_columns,
            "max_file_columns",
            "keep only the columns the fit needs in the file",
        )
    if whole and md.num_rows > limits.max_rows:
        raise too_big(
            "rows",
            md.num_rows,
            limits.max_rows,
            "max_fit_rows",
            "fit on a sample, or split the data by period",
        )
    schema = pf.schema_arrow
    leaf: dict[str, int] = {}
    for j in range(md.num_columns):
        leaf.setdefault(md.schema.column(j).path, j)
    wanted: list[tuple[int, int, bool]] = []
    for name in columns:
        if name not in schema.names:
            continue  # named by the caller's missing-column error
        typ = schema.field(name).type
        if pa.types.is_nested(typ) or name not in leaf:
            raise DataError(
                f"column {name!r} of {shown} holds nested values ({typ})",
                field=f"data.columns.{name}",
                value=str(typ)[:80],
                remedy=f"store {name} as one number or one text value per row",
            )
        wanted.append((leaf[name], *_width(typ)))
    total = 0
    for g in range(md.num_row_groups):
        rg = md.row_group(g)
        size = 0
        for j, width, plus_chunk in wanted:
            size += rg.num_rows * width
            if plus_chunk:
                size += max(rg.column(j).total_uncompressed_size, 0)
        total = total + size if whole else size
        if total > limits.max_decoded_bytes:
            raise _decoded_too_big(total, limits, "columns" if whole else "a row group")


def check_decoded(size: int, limits: ReadLimits) -> None:
    """Stop a read whose decoded bytes so far (``size``) pass the budget."""
    if size > limits.max_decoded_bytes:
        raise _decoded_too_big(size, limits, "columns")
