"""Request data to typed numpy columns: JSON columns or rows, CSV and Parquet uploads.

Everything a fit or a score batch reads passes through :func:`coerce_column`, which turns
raw values into either a float64 array (``numeric``/``spline`` features, weights, offset)
or an object array of ``str`` (``categorical``), and names the first bad cell in its error
(``field`` like ``data.columns.age_years[17]`` or ``records[17].age_years``).

Categorical values are compared as text: ``3`` and ``3.0`` both become ``"3"``, so a level
coded as a number in a CSV file matches the same level sent as a JSON number.
The outcome column must hold 0 and 1 only (``true``/``false`` are accepted as 1/0).

Categorical text is normalised to Unicode NFC (canonical composition, Unicode Standard
Annex #15) wherever fit data enter (:func:`nfc_coded` for JSON, CSV and Parquet uploads,
:func:`nfc_arrow` for server-side files): ``"caf\\u00e9"`` and ``"cafe\\u0301"`` are one
level, stored in its NFC spelling. Only the distinct levels are normalised (Arrow's
``utf8_normalize`` for streamed chunks), so the cost is per level, not per row.
Uploads are read by :func:`service.sources.upload_read.read_table` (re-exported here) within
:class:`~service.sources.file_limits.ReadLimits`.
"""

from __future__ import annotations

import math
import unicodedata
from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from service.errors import DataError, MissingFeatureError
from service.sources.file_limits import ReadLimits
from service.sources.upload_read import CSV_DICTIONARY_LEVELS, read_table
from service.stats.columns import CodedLabels

__all__ = [
    "CSV_DICTIONARY_LEVELS",
    "NUMERIC_KINDS",
    "FieldNamer",
    "ReadLimits",
    "TrainingData",
    "cell_namer",
    "coerce_column",
    "coerce_outcome",
    "columns_from_rows",
    "nfc_arrow",
    "nfc_coded",
    "read_table",
    "table_columns",
    "training_data",
]

NUMERIC_KINDS = frozenset({"numeric", "spline"})
FieldNamer = Callable[[int], str]
_MISSING = object()


@dataclass(frozen=True)
class TrainingData:
    """Validated training columns: ``columns[name]`` (n,), ``y`` (n,) float64 of 0/1.

    ``coded[name]``: the same categorical column as integer codes (when built here), for the
    steps that only need to tell levels apart (design matrix, level counts, fingerprint).
    """

    columns: dict[str, np.ndarray]
    y: np.ndarray
    weights: np.ndarray | None
    offset: np.ndarray | None
    n_obs: int
    coded: dict[str, CodedLabels] = field(default_factory=dict)

    def level_columns(self) -> dict[str, np.ndarray]:
        """``columns`` with each coded categorical replaced by its distinct levels (object array).

        For checks that only look at the distinct values of a categorical column (the limits
        on their count and length): one entry per level instead of one per row.
        """
        levels = {k: np.array(c.levels, dtype=object) for k, c in self.coded.items()}
        return {**self.columns, **levels}


def _level_text(value: Any) -> str:
    if isinstance(value, bool):
        return "true" if value else "false"
    if isinstance(value, float) and value.is_integer():
        return str(int(value))
    return str(value)


def coerce_column(name: str, kind: str, values: Any, where: FieldNamer) -> np.ndarray:
    """``values`` (a sequence, numpy or pyarrow array) as float64 or an object array of str.

    Raises :class:`DataError` naming ``where(i)`` for the first missing, non-numeric or
    non-finite value of a numeric column, or the first missing value of a categorical one.
    """
    if isinstance(values, pa.ChunkedArray | pa.Array):
        return _coerce_arrow(name, kind, values, where)
    seq = values if isinstance(values, Sequence | np.ndarray) else list(values)
    if kind in NUMERIC_KINDS:
        raw = np.asarray(seq) if not isinstance(seq, np.ndarray) else seq
        if raw.ndim != 1 or raw.dtype.kind not in "fiu":
            _raise_first_non_number(name, seq, where)  # None, text, bools, nested lists
        if raw is not seq and bool in set(map(type, seq)):  # numpy casts [True, 12] to ints
            _raise_first_non_number(name, seq, where)
        try:
            arr = np.asarray(raw, dtype=np.float64)
        except (TypeError, ValueError, OverflowError):
            arr = np.asarray([_float_or_inf(v) for v in seq], dtype=np.float64)
        bad = np.flatnonzero(~np.isfinite(arr))
        if bad.size:
            i = int(bad[0])
            raise DataError(
                f"{name} must be a finite number, got {str(seq[i])[:40]}",
                field=where(i),
                value=seq[i] if seq[i] is not None else "null",
                remedy=f"send a finite number for {name} (missing values are not imputed)",
            )
        return arr
    out = np.empty(len(seq), dtype=object)
    for i, v in enumerate(seq):
        if v is None or (isinstance(v, float) and math.isnan(v)):
            raise DataError(
                f"categorical feature {name} has a missing value",
                field=where(i),
                value="null",
                remedy=f"send one of the levels of {name} (missing values are not imputed)",
            )
        out[i] = v if isinstance(v, str) else _level_text(v)
    return out


def _float_or_inf(value: Any) -> float:
    try:
        return float(value)
    except OverflowError:
        return math.inf


def _clip(value: Any) -> str:
    text = repr(value)
    return text if len(text) <= 80 else text[:80] + "..."


def _raise_first_non_number(name: str, seq: Sequence[Any] | np.ndarray, where: FieldNamer) -> None:
    for i, v in enumerate(seq):
        if v is None:
            raise DataError(
                f"numeric feature {name} has a missing value",
                field=where(i),
                value="null",
                remedy=f"send a finite number for {name} (missing values are not imputed)",
            )
        if isinstance(v, bool) or not isinstance(v, int | float | np.integer | np.floating):
            raise DataError(
                f"numeric feature {name} must hold numbers, got {type(v).__name__} {_clip(v)}",
                field=where(i),
                value=v,
                remedy=f"send {name} as a JSON number, or declare it kind='categorical'",
            )
    if all(isinstance(v, int | float | np.integer | np.floating) for v in seq):
        return  # plain numbers (huge integers included): the float conversion decides
    raise DataError(
        f"{name} is not a flat list of numbers",
        field=where(0),
        value=None,
        remedy=f"send {name} as a list of numbers",
    )


def _coerce_arrow(name: str, kind: str, arr: Any, where: FieldNamer) -> np.ndarray:
    if arr.null_count:
        i = int(pc.index(pc.is_null(arr), True).as_py())
        raise DataError(
            f"column {name} has an empty cell",
            field=where(i),
            value="null",
            remedy=f"fill every cell of {name} (missing values are not imputed)",
        )
    typ = arr.type
    if pa.types.is_dictionary(typ):
        value_type = typ.value_type
        numeric_values = pa.types.is_integer(value_type) or pa.types.is_floating(value_type)
        if kind in NUMERIC_KINDS and not numeric_values:  # text: the first row is not a number
            _raise_first_non_number(name, arr.slice(0, 1).cast(value_type).to_pylist(), where)
        arr, typ = arr.cast(value_type), value_type
    if kind in NUMERIC_KINDS:
        if not (pa.types.is_integer(typ) or pa.types.is_floating(typ)):
            values = arr.to_pylist()
            _raise_first_non_number(name, values, where)
        values = arr.to_numpy(zero_copy_only=False)  # a read-only view of one float64 chunk
        if values.dtype != np.float64 or not values.flags.writeable:
            values = values.astype(np.float64)  # copied once (several chunks: already a copy)
        return coerce_column(name, kind, values, where)
    if pa.types.is_string(typ) or pa.types.is_large_string(typ):
        return np.asarray(arr.to_numpy(zero_copy_only=False), dtype=object)
    return coerce_column(name, kind, arr.to_pylist(), where)


def coerce_outcome(name: str, values: Any, where: FieldNamer) -> np.ndarray:
    """The outcome as a float64 array of 0.0/1.0; anything else is a :class:`DataError`."""
    if isinstance(values, pa.ChunkedArray | pa.Array):
        if pa.types.is_boolean(values.type):
            values = values.cast(pa.int8())
        arr = coerce_column(name, "numeric", values, where)
    else:
        seq = [int(v) if isinstance(v, bool) else v for v in values]
        arr = coerce_column(name, "numeric", seq, where)
    bad = np.flatnonzero((arr != 0.0) & (arr != 1.0))
    if bad.size:
        i = int(bad[0])
        raise DataError(
            f"outcome column {name} must hold 0 or 1, got {arr[i]:g}",
            field=where(i),
            value=float(arr[i]),
            remedy=f"code {name} as 1 for the event and 0 for no event",
        )
    return arr


def columns_from_rows(
    rows: Sequence[Mapping[str, Any]], names: Sequence[str], prefix: str
) -> dict[str, list[Any]]:
    """Row dicts to lists per needed column; a row lacking a name is a missing feature."""
    out: dict[str, list[Any]] = {}
    for name in names:
        col = [row.get(name, _MISSING) for row in rows]
        for i, v in enumerate(col):
            if v is _MISSING:
                raise MissingFeatureError(
                    f"{prefix}[{i}] has no value for {name}",
                    field=f"{prefix}[{i}].{name}",
                    value=None,
                    remedy=f"give every record a value for {name}",
                )
        out[name] = col
    return out


def table_columns(table: pa.Table, names: Sequence[str]) -> dict[str, Any]:
    """The named columns of ``table``; a missing column is a :class:`MissingFeatureError`."""
    present = set(table.column_names)
    for name in names:
        if name not in present:
            raise MissingFeatureError(
                f"the uploaded file has no column {name!r}",
                field=f"data.columns.{name}",
                value=name,
                remedy=f"add a column named {name}; the file has: "
                + ", ".join(sorted(present))[:300],
            )
    return {name: table.column(name) for name in names}


def cell_namer(layout: str, name: str) -> FieldNamer:
    """Field path of cell ``i`` of column ``name`` for the request's data layout."""
    if layout == "rows":
        return lambda i: f"data.rows[{i}].{name}"
    return lambda i: f"data.columns.{name}[{i}]"


def training_data(
    raw: Mapping[str, Any],
    *,
    kinds: Mapping[str, str],
    outcome: str,
    weights: str | None = None,
    offset: str | None = None,
    layout: str = "columns",
) -> TrainingData:
    """Validate raw training columns (lists, numpy or pyarrow arrays) into :class:`TrainingData`.

    ``layout`` (``"columns"``, ``"rows"`` or ``"file"``) only shapes the field paths of errors.
    """
    needed = [*kinds, outcome, *(c for c in (weights, offset) if c)]
    for name in needed:
        if name not in raw:
            raise MissingFeatureError(
                f"the data have no column {name!r}",
                field=f"data.columns.{name}",
                value=name,
                remedy=f"add {name} to the data, or remove it from the spec",
            )
    lengths = {name: len(raw[name]) for name in needed}
    n = lengths[outcome]
    if n == 0:
        raise DataError(
            "the data hold no rows",
            field="data",
            value=0,
            remedy="send at least a few hundred rows with both outcomes present",
        )
    for name, length in lengths.items():
        if length != n:
            raise DataError(
                f"column {name} has {length} values but {outcome} has {n}",
                field=f"data.columns.{name}",
                value=length,
                remedy="give every column the same number of values",
            )
    columns: dict[str, np.ndarray] = {}
    coded: dict[str, CodedLabels] = {}
    for name, kind in kinds.items():
        where = cell_namer(layout, name)
        if kind in NUMERIC_KINDS:
            columns[name] = coerce_column(name, kind, raw[name], where)
        else:
            coded[name] = _coded_column(name, raw[name], where)
            columns[name] = coded[name].to_array()
    y = coerce_outcome(outcome, raw[outcome], cell_namer(layout, outcome))
    w = (
        coerce_column(weights, "numeric", raw[weights], cell_namer(layout, weights))
        if weights
        else None
    )
    if w is not None and (w < 0).any():
        i = int(np.flatnonzero(w < 0)[0])
        raise DataError(
            f"weights column {weights} has a negative value {w[i]:g}",
            field=cell_namer(layout, str(weights))(i),
            value=float(w[i]),
            remedy="case weights must be >= 0",
        )
    off = (
        coerce_column(offset, "numeric", raw[offset], cell_namer(layout, offset))
        if offset
        else None
    )
    return TrainingData(columns=columns, y=y, weights=w, offset=off, n_obs=n, coded=coded)


def nfc_coded(coded: CodedLabels) -> CodedLabels:
    """``coded`` with its levels in NFC; levels equal once normalised merge (codes remapped)."""
    levels = coded.levels
    if all(lv.isascii() or unicodedata.is_normalized("NFC", lv) for lv in levels):
        return coded
    index: dict[str, int] = {}
    remap = np.empty(len(levels), dtype=np.intp)
    for j, lv in enumerate(levels):
        remap[j] = index.setdefault(unicodedata.normalize("NFC", lv), len(index))
    return CodedLabels(remap[coded.codes], tuple(index))


def nfc_arrow(values: Any) -> Any:
    """An Arrow text column (plain or dictionary) with its text in NFC (other types as given)."""
    if isinstance(values, pa.ChunkedArray):
        if not any(isinstance(c, pa.DictionaryArray) or _is_text(c.type) for c in values.chunks):
            return values
        return pa.chunked_array([nfc_arrow(c) for c in values.chunks], type=values.type)
    if isinstance(values, pa.DictionaryArray) and _is_text(values.dictionary.type):
        fixed = pc.utf8_normalize(values.dictionary, "NFC")
        return pa.DictionaryArray.from_arrays(values.indices, fixed)
    if isinstance(values, pa.Array) and _is_text(values.type):
        return pc.utf8_normalize(values, "NFC")
    return values


def _is_text(typ: pa.DataType) -> bool:
    return bool(pa.types.is_string(typ) or pa.types.is_large_string(typ))


def _coded_column(name: str, values: Any, where: FieldNamer) -> CodedLabels:
    """A categorical column as NFC-normalised codes (:func:`nfc_coded`)."""
    return nfc_coded(_coded(name, values, where))


def _coded(name: str, values: Any, where: FieldNamer) -> CodedLabels:
    """A categorical column as codes: Arrow text by ``dictionary_encode``, else a hash pass."""
    if isinstance(values, pa.ChunkedArray | pa.Array) and not values.null_count:
        arr = values.combine_chunks() if isinstance(values, pa.ChunkedArray) else values
        if pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type):
            arr = pc.dictionary_encode(arr)
        if pa.types.is_dictionary(arr.type) and (
            pa.types.is_string(arr.type.value_type) or pa.types.is_large_string(arr.type.value_type)
        ):
            codes = arr.indices.to_numpy(zero_copy_only=False)
            return CodedLabels.compact(codes, arr.dictionary.to_pylist())
    return CodedLabels.from_strings(coerce_column(name, "categorical", values, where))
