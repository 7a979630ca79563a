"""Scoring input: a batch of raw columns from rows or columns, with its client keys.

Input comes as rows (``records``: one dict per record) or as columns (``columns``: one
list per feature, the faster layout for big batches); both become one :class:`ScoreInput`
of raw columns, validated as arrays (never one model object per record). Keys (``key`` in a
record, or the ``key`` column) are text of 1 to 200 characters; numbers are written as text.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from itertools import repeat
from operator import contains, itemgetter, methodcaller
from typing import Any

import numpy as np

from service.data_io import FieldNamer, coerce_column, columns_from_rows
from service.errors import DataError

__all__ = [
    "KEY_FIELD",
    "ScoreInput",
    "coerced",
    "columns_input",
    "namer",
    "record_keys",
    "records_input",
]

KEY_FIELD = "key"


@dataclass(frozen=True)
class ScoreInput:
    """Raw columns of a batch (name -> n values), client keys (None: no record has one)."""

    columns: Mapping[str, Sequence[Any] | np.ndarray]
    keys: list[str | None] | None
    n: int
    field: Callable[[str, int], str]  # (column, row) -> field path for errors
    prefix: str  # "records" or "columns": the request part that holds the data


def _key_text(value: Any, where: str) -> str | None:
    if value is None:
        return None
    if isinstance(value, bool) or not isinstance(value, str | int | float):
        raise DataError(
            "a record key must be text or a number",
            field=where,
            value=repr(value)[:80],
            remedy="use a string identifier, or omit key",
        )
    k = value if isinstance(value, str) else _number_text(value)
    if not 1 <= len(k) <= 200:
        raise DataError(
            "a record key must be 1 to 200 characters",
            field=where,
            value=k,
            remedy="use a shorter identifier, or omit key",
        )
    return k


def _number_text(value: float) -> str:
    return str(int(value)) if isinstance(value, float) and value.is_integer() else str(value)


def record_keys(values: Sequence[Any], prefix: str) -> list[str | None] | None:
    """The keys of records ``prefix[i].key`` as text, or None when no record has one."""
    return _keys(values, lambda i: f"{prefix}[{i}].key")


def _keys(values: Sequence[Any], field: Callable[[int], str]) -> list[str | None] | None:
    if values.count(None) == len(values):
        return None
    return [_key_text(v, field(i)) for i, v in enumerate(values)]


def records_input(records: Sequence[Mapping[str, Any]], names: Sequence[str]) -> ScoreInput:
    """Rows (``records[i][name]``) as columns; a record lacking a name is a missing feature."""
    try:
        cols: dict[str, Any] = {name: list(map(itemgetter(name), records)) for name in names}
    except KeyError:
        cols = columns_from_rows(records, names, "records")  # names the first record lacking one
    keys = None  # most batches carry no keys: one C-level pass finds that out
    if any(map(contains, records, repeat(KEY_FIELD))):
        keys = record_keys(list(map(methodcaller("get", KEY_FIELD), records)), "records")
    return ScoreInput(cols, keys, len(records), lambda name, i: f"records[{i}].{name}", "records")


def columns_input(columns: Mapping[str, Sequence[Any]], names: Sequence[str]) -> ScoreInput:
    """Columns (``columns[name][i]``); all of the same length, every needed name present."""
    lengths = {name: len(col) for name, col in columns.items()}
    n = max(lengths.values(), default=0)
    for name in [*names, *((KEY_FIELD,) if KEY_FIELD in columns else ())]:
        if name not in columns:
            raise DataError(
                f"columns has no column {name!r}",
                field=f"columns.{name}",
                value=None,
                remedy=f"give a list of values for {name} (one per record)",
            )
        if lengths[name] != n or n == 0:
            raise DataError(
                f"column {name} has {lengths[name]} values, the longest has {n}",
                field=f"columns.{name}",
                value=lengths[name],
                remedy="give every column one value per record (at least one record)",
            )
    raw_keys = columns.get(KEY_FIELD)
    keys = _keys(raw_keys, lambda i: f"columns.key[{i}]") if raw_keys is not None else None
    return ScoreInput(
        {name: columns[name] for name in names},
        keys,
        n,
        lambda name, i: f"columns.{name}[{i}]",
        "columns",
    )


def namer(data: ScoreInput, name: str) -> FieldNamer:
    """Field paths of column ``name``'s cells (``records[i].name`` or ``columns.name[i]``)."""
    return lambda i: data.field(name, i)


def coerced(batch: ScoreInput, name: str, kind: str) -> np.ndarray:
    """Column ``name`` of ``batch`` as the array its ``kind`` needs (errors name the cell)."""
    values = batch.columns[name]
    if kind == "categorical" and set(map(type, values)) == {str}:
        return np.array(values, dtype=object)  # already level text: nothing to convert
    return coerce_column(name, kind, values, namer(batch, name))
