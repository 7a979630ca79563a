"""Scoring input: a batch of raw columns from rows or columns, with its client keys.

Input comes as rows (``records``: one dict per record) or as columns (``columns``: one
list per feature, the faster layout for big batches); both become one :class:`ScoreInput`
of raw columns, validated as arrays (never one model object per record). Keys (``key`` in a
record, or the ``key`` column) are text of 1 to 200 characters; numbers are written as text.

A record holds the version's inputs (features, then its offset column), optionally ``key``
and optionally ``passthrough``: an object of the caller's own scalars (text, numbers,
booleans, null), not used for scoring and echoed with the record's score. Any other field is
refused (422 naming the record, the unknown fields and the known ones), so a misspelt feature
never goes unnoticed. In the columns layout ``passthrough`` is a list of such objects (or
nulls), one per record. When a version has a feature (or offset) literally called ``key`` or
``passthrough``, that field is the feature's value.

Text is compared in Unicode normal form C: a categorical value that is not one of the
version's levels as sent is normalised (NFC) before the lookup, so ``"é"`` sent decomposed
(NFD) scores as the level ``"é"`` fitted composed; passthrough text is echoed in NFC too.
"""

from __future__ import annotations

import difflib
import math
import unicodedata
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
    "PASSTHROUGH_FIELD",
    "LevelSpelling",
    "ScoreInput",
    "coerced",
    "columns_input",
    "level_spelling",
    "namer",
    "passthrough",
    "record_keys",
    "records_input",
    "unknown_fields",
]

KEY_FIELD = "key"
PASSTHROUGH_FIELD = "passthrough"
_RESERVED = (KEY_FIELD, PASSTHROUGH_FIELD)
_PASSTHROUGH_REMEDY = (
    "correct the field's spelling, remove it, or move the caller's own data into the "
    f"record's {PASSTHROUGH_FIELD!r} object (echoed with the score, not used for scoring)"
)

Passthrough = dict[str, Any] | None


@dataclass(frozen=True)
class ScoreInput:
    """Raw columns of a batch (name -> n values), client keys (None: no record has one).

    ``passthrough``: each record's passthrough object (or None), None when no record has one.
    """

    columns: Mapping[str, Sequence[Any] | np.ndarray]
    keys: list[str | None] | None
    n: int
    field: Callable[[str, int], str]  # (column, row) -> field path for errors
    prefix: str  # "records" or "columns": the request part that holds the data
    passthrough: list[Passthrough] | None = None


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
    """Rows (``records[i][name]``) as columns; a record lacking a name is a missing feature
    (or, when it also has unknown fields, most likely a misspelt one: those are named)."""
    try:
        cols: dict[str, Any] = {name: list(map(itemgetter(name), records)) for name in names}
    except KeyError:
        i, r = next((i, r) for i, r in enumerate(records) if not all(map(r.__contains__, names)))
        if not frozenset(names).union(_RESERVED).issuperset(r):
            raise unknown_fields(r, i, names) from None
        cols = columns_from_rows(records, names, "records")  # names the first record lacking one
    if set(map(len, records)) != {len(names)}:  # every name is there: anything more?
        known = frozenset(names).union(_RESERVED)
        if not all(map(known.issuperset, records)):
            i = next(i for i, r in enumerate(records) if not known.issuperset(r))
            raise unknown_fields(records[i], i, names)
    keys = None  # most batches carry no keys: one C-level pass finds that out
    if any(map(contains, records, repeat(KEY_FIELD))):
        keys = record_keys(list(map(methodcaller("get", KEY_FIELD), records)), "records")
    extra = None
    if PASSTHROUGH_FIELD not in names and any(map(contains, records, repeat(PASSTHROUGH_FIELD))):
        get = methodcaller("get", PASSTHROUGH_FIELD)
        extra = [
            passthrough(get(r), f"records[{i}].{PASSTHROUGH_FIELD}") for i, r in enumerate(records)
        ]
    return ScoreInput(
        cols, keys, len(records), lambda name, i: f"records[{i}].{name}", "records", extra
    )


def unknown_fields(record: Mapping[str, Any], i: int, names: Sequence[str]) -> DataError:
    """The refusal of record ``i`` for its fields that are not among ``names`` (nor reserved)."""
    known = [*names, *(r for r in _RESERVED if r not in names)]
    unknown = [k for k in record if k not in known]
    hints = [
        f"{close[0]!r} for {u!r}"
        for u in unknown
        if (close := difflib.get_close_matches(str(u), list(names), n=1))
    ]
    return DataError(
        f"records[{i}] has unknown field(s) {', '.join(map(repr, unknown))}; a record of this "
        f"version holds {', '.join(map(repr, names))}, optionally 'key' and 'passthrough'"
        + (f" (did you mean {'; '.join(hints)}?)" if hints else ""),
        field=f"records[{i}].{unknown[0]}",
        value=record[unknown[0]],
        remedy=_PASSTHROUGH_REMEDY,
        details={"record": i, "unknown": unknown, "known": known},
    )


def passthrough(value: Any, field: str) -> Passthrough:
    """A record's passthrough object (at ``field``) checked (scalars only), text in NFC."""
    if value is None:
        return None
    if not isinstance(value, dict):
        raise DataError(
            f"{PASSTHROUGH_FIELD} must be an object of the caller's own values",
            field=field,
            value=repr(value)[:80],
            remedy='send e.g. {"passthrough": {"asset_id": "A-17", "region": "north"}} or omit it',
        )
    out: dict[str, Any] = {}
    for k, v in value.items():
        if isinstance(v, list | dict) or (isinstance(v, float) and not math.isfinite(v)):
            raise DataError(
                f"{PASSTHROUGH_FIELD} values must be text, finite numbers, booleans or null",
                field=f"{field}.{k}",
                value=repr(v)[:80],
                remedy="flatten the value into text or separate fields",
            )
        out[_nfc(k)] = _nfc(v) if isinstance(v, str) else v
    return out


def _nfc(text: str) -> str:
    return text if text.isascii() else unicodedata.normalize("NFC", text)


def columns_input(columns: Mapping[str, Sequence[Any]], names: Sequence[str]) -> ScoreInput:
    """Columns (``columns[name][i]``); all of the same length, every needed name present."""
    lengths = {name: len(col) for name, col in columns.items()}
    n = max(lengths.values(), default=0)
    unknown = [k for k in columns if k not in names and k not in _RESERVED]
    if unknown:
        known = [*names, *(r for r in _RESERVED if r not in names)]
        raise DataError(
            f"columns has unknown column(s) {', '.join(map(repr, unknown))}; this version "
            f"scores {', '.join(map(repr, names))}, optionally 'key' and 'passthrough'",
            field=f"columns.{unknown[0]}",
            value=unknown[0],
            remedy=_PASSTHROUGH_REMEDY.replace("record's", "records'") + " (one object per record)",
            details={"unknown": unknown, "known": known},
        )
    own = [r for r in _RESERVED if r in columns and r not in names]
    for name in [*names, *own]:
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
    extra = None
    if PASSTHROUGH_FIELD in own:
        raw = columns[PASSTHROUGH_FIELD]
        extra = [passthrough(p, f"columns.{PASSTHROUGH_FIELD}[{i}]") for i, p in enumerate(raw)]
    return ScoreInput(
        {name: columns[name] for name in names},
        keys,
        n,
        lambda name, i: f"columns.{name}[{i}]",
        "columns",
        extra,
    )


def namer(data: ScoreInput, name: str) -> FieldNamer:
    """Field paths of column ``name``'s cells (``records[i].name`` or ``columns.name[i]``)."""
    return lambda i: data.field(name, i)


def coerced(
    batch: ScoreInput, name: str, kind: str, spelling: LevelSpelling | None = None
) -> np.ndarray:
    """Column ``name`` of ``batch`` as the array its ``kind`` needs (errors name the cell).

    A categorical column's text is matched to the version's levels (``spelling``) in NFC.
    """
    values = batch.columns[name]
    if kind == "categorical" and set(map(type, values)) == {str}:
        out = np.array(values, dtype=object)  # already level text: nothing to convert
    else:
        out = coerce_column(name, kind, values, namer(batch, name))
    if kind == "categorical":
        return spelled(out, spelling or _NO_SPELLING)
    return out


@dataclass(frozen=True)
class LevelSpelling:
    """A categorical feature's stored ``levels`` and ``aliases``: NFC form -> stored level,
    for stored levels not in NFC (versions fitted before text was normalised)."""

    levels: frozenset[str]
    aliases: Mapping[str, str]


_NO_SPELLING = LevelSpelling(frozenset(), {})


def level_spelling(levels: Sequence[str]) -> LevelSpelling:
    """The spelling table of a feature fitted with ``levels`` (ambiguous NFC forms left out)."""
    stored = frozenset(levels)
    forms: dict[str, list[str]] = {}
    for lv in levels:
        nfc = unicodedata.normalize("NFC", lv)
        if nfc != lv and nfc not in stored:
            forms.setdefault(nfc, []).append(lv)
    return LevelSpelling(stored, {k: v[0] for k, v in forms.items() if len(v) == 1})


def spelled(values: np.ndarray, spelling: LevelSpelling) -> np.ndarray:
    """``values`` (object array of str) with each value not among the stored levels replaced
    by its NFC form (or the stored level of that form). ASCII text is already NFC."""
    if not spelling.aliases and "".join(values).isascii():
        return values
    levels, aliases = spelling.levels, spelling.aliases
    table: dict[str, str] = {}
    for v in set(values.tolist()):
        nfc = v if v in levels else unicodedata.normalize("NFC", v)
        table[v] = aliases.get(nfc, nfc)
    if all(k == v for k, v in table.items()):
        return values
    return np.array(list(map(table.__getitem__, values.tolist())), dtype=object)
