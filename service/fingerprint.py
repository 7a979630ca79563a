"""Data fingerprint (SHA-256, hex) of the canonical training data of a version.

The hash covers exactly what the fit used, independent of how it was sent (JSON columns,
JSON rows, CSV or Parquet give the same fingerprint for the same values):

* the header ``b"riskfit-training-data/1\\n"`` and the row count as uint64 little-endian;
* then, for each used column in sorted name order (features, the outcome, weights, offset):
  the UTF-8 name, a NUL byte, a one-byte type tag (``f`` float, ``s`` text), then the data:
  ``f`` columns as float64 little-endian (C order, ``-0.0`` normalised to ``0.0``; the outcome
  is stored as 0.0/1.0), ``s`` columns as each value's UTF-8 bytes preceded by its length as
  uint32 little-endian.

Row order is part of the data (two files with the same rows in another order differ).
"""

from __future__ import annotations

import hashlib
import struct
from collections.abc import Callable, Iterable, Iterator, Mapping

import numpy as np
import pyarrow as pa

from service.data_io import TrainingData
from service.stats.columns import CodedLabels

__all__ = ["data_fingerprint", "fingerprint_columns"]

_TEXT_ROWS = 1 << 20  # rows of a text column turned into bytes at a time


def data_fingerprint(
    data: TrainingData, outcome: str, weights: str | None, offset: str | None
) -> str:
    """SHA-256 of the canonical training data (see the module docstring)."""
    cols: dict[str, np.ndarray | CodedLabels] = {**data.columns, **data.coded}
    cols[outcome] = data.y
    if weights and data.weights is not None:
        cols[weights] = data.weights
    if offset and data.offset is not None:
        cols[offset] = data.offset
    return fingerprint_columns(data.n_obs, {k: _whole(v) for k, v in cols.items()})


def _whole(values: np.ndarray | CodedLabels) -> Callable[[], list[np.ndarray | CodedLabels]]:
    return lambda: [values]


def fingerprint_columns(
    n_obs: int, columns: Mapping[str, Callable[[], Iterable[np.ndarray | CodedLabels]]]
) -> str:
    """The fingerprint from each column's consecutive parts (one call per column, in order).

    ``columns[name]()`` yields the column's values part by part (a whole array, or the chunks
    of a streamed file); the bytes hashed are those of :func:`data_fingerprint`.
    """
    h = hashlib.sha256(b"riskfit-training-data/1\n")
    h.update(struct.pack("<Q", n_obs))
    for name in sorted(columns):
        h.update(name.encode() + b"\x00")
        tagged = False
        for values in columns[name]():
            is_float = not isinstance(values, CodedLabels) and values.dtype.kind == "f"
            if not tagged:
                h.update(b"f" if is_float else b"s")
                tagged = True
            if is_float:
                h.update((np.ascontiguousarray(values, dtype="<f8") + 0.0).data)
            else:
                for part in _text_parts(values):
                    h.update(part)
    return h.hexdigest()


def _text_parts(values: np.ndarray | CodedLabels) -> Iterator[memoryview]:
    """Each value's UTF-8 bytes after its length (uint32 LE), as consecutive byte buffers.

    Every distinct value is encoded once; a slice of rows is then one Arrow ``take`` of those
    pieces by code, whose data buffer is exactly the pieces in row order (no Python work per
    row).
    """
    if not isinstance(values, CodedLabels):
        values = CodedLabels.from_strings([str(v) for v in values.tolist()])
    pieces = [struct.pack("<I", len(b)) + b for b in (lv.encode() for lv in values.levels)]
    table = pa.array(pieces, pa.large_binary())
    codes = values.codes
    for lo in range(0, codes.shape[0], _TEXT_ROWS):
        taken = table.take(pa.array(codes[lo : lo + _TEXT_ROWS]))
        offsets = np.frombuffer(taken.buffers()[1], dtype=np.int64)
        data = taken.buffers()[2]
        if data is not None:
            yield memoryview(data)[
                int(offsets[taken.offset]) : int(offsets[taken.offset + len(taken)])
            ]
