"""Read one raw input column as numbers or as categorical labels, with clear errors.

Every error names the feature (``field`` is ``<prefix>.<name>[row]``), the
offending value and a remedy. Categorical labels are compared as strings
(``str(value)``); ``None`` and NaN are missing values, never a level.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from service.errors import DataError, MissingFeatureError

__all__ = ["CodedLabels", "coded_labels", "get_column", "labels", "numbers"]


@dataclass(frozen=True, eq=False)
class CodedLabels:
    """Categorical labels as integer codes: value ``i`` is ``levels[codes[i]]``.

    ``codes`` (n,) intp; ``levels`` distinct strings, each used by at least one row, in no
    particular order. One encoding serves the design matrix, the level counts of the PSI
    reference and training ranges, and the data fingerprint, so the strings of a large
    column are compared once (a hash lookup per row) instead of sorted in every step.
    """

    codes: np.ndarray
    levels: tuple[str, ...]

    def __len__(self) -> int:
        return int(self.codes.shape[0])

    def counts(self) -> np.ndarray:
        """Rows per level (len(levels),), in ``levels`` order."""
        return np.bincount(self.codes, minlength=len(self.levels))

    def to_array(self) -> np.ndarray:
        """The labels as an object array of ``str`` (n,)."""
        table = np.empty(len(self.levels), dtype=object)
        table[:] = self.levels
        out: np.ndarray = table[self.codes]
        return out

    @classmethod
    def compact(cls, codes: np.ndarray, levels: Sequence[str]) -> CodedLabels:
        """From any codes into ``levels`` (distinct): unused levels are dropped."""
        codes = np.asarray(codes, dtype=np.intp)
        used = np.bincount(codes, minlength=len(levels)) > 0
        if used.all():
            return cls(codes, tuple(levels))
        new = np.cumsum(used) - 1
        return cls(new[codes], tuple(lv for lv, u in zip(levels, used, strict=True) if u))

    @classmethod
    def from_strings(cls, values: Sequence[str] | np.ndarray) -> CodedLabels:
        """From values that are all ``str`` (two C-level passes: distinct values, lookups)."""
        seq = values.tolist() if isinstance(values, np.ndarray) else values
        index = {lv: j for j, lv in enumerate(dict.fromkeys(seq))}
        codes = np.fromiter(map(index.__getitem__, seq), dtype=np.intp, count=len(seq))
        return cls(codes, tuple(index))


def coded_labels(col: Any, name: str, prefix: str) -> CodedLabels:
    """``col`` as :class:`CodedLabels`, refusing missing values as :func:`labels` does."""
    if isinstance(col, CodedLabels):
        return col
    seq = col.tolist() if isinstance(col, np.ndarray) else col
    if set(map(type, seq)) == {str}:
        return CodedLabels.from_strings(seq)
    return CodedLabels.from_strings(labels(seq, name, prefix).tolist())


def get_column(
    columns: Mapping[str, np.ndarray | Sequence[Any] | CodedLabels],
    name: str,
    prefix: str,
    n: int | None,
) -> np.ndarray | Sequence[Any] | CodedLabels:
    """The column ``name``; MissingFeatureError if absent, DataError if its length differs."""
    if name not in columns:
        raise MissingFeatureError(
            f"feature {name!r} is missing",
            field=f"{prefix}.{name}",
            value=None,
            remedy=f"supply a value of {name!r} for every record",
        )
    col = columns[name]
    if n is not None and len(col) != n:
        raise DataError(
            f"feature {name!r} has {len(col)} values, expected {n}",
            field=f"{prefix}.{name}",
            value=len(col),
            remedy="give every feature one value per record",
        )
    return col


def numbers(
    col: np.ndarray | Sequence[Any], name: str, prefix: str, *, log: bool = False
) -> np.ndarray:
    """Float64 values of a numeric feature (log-transformed if ``log``)."""
    try:
        x = np.asarray(col, dtype=np.float64)
    except (TypeError, ValueError):
        for i, v in enumerate(col):
            try:
                float(v)
            except (TypeError, ValueError):
                raise DataError(
                    f"feature {name!r} needs numbers; row {i} holds {v!r}",
                    field=f"{prefix}.{name}[{i}]",
                    value=v,
                    remedy=f"send a number for {name!r}",
                ) from None
        raise
    if x.ndim != 1:
        raise DataError(
            f"feature {name!r} must be a flat list of values",
            field=f"{prefix}.{name}",
            value=f"shape {x.shape}",
            remedy="send one value per record",
        )
    bad = ~np.isfinite(x)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise DataError(
            f"feature {name!r} has a missing or non-finite value at row {i}",
            field=f"{prefix}.{name}[{i}]",
            value=float(x[i]),
            remedy=f"send a finite number for {name!r} (impute or drop the record)",
        )
    if log:
        bad = x <= 0
        if bad.any():
            i = int(np.flatnonzero(bad)[0])
            raise DataError(
                f"feature {name!r} is log-transformed but row {i} holds {x[i]:g} (<= 0)",
                field=f"{prefix}.{name}[{i}]",
                value=float(x[i]),
                remedy=f"send a positive {name!r}, or drop the log transform from the spec",
            )
        x = np.log(x)
    return x


def _is_missing(v: Any) -> bool:
    return v is None or (isinstance(v, float) and math.isnan(v))


def labels(col: np.ndarray | Sequence[Any], name: str, prefix: str) -> np.ndarray:
    """Categorical labels as a 1-d array of ``str``."""
    if isinstance(col, CodedLabels):
        return col.to_array()
    values = list(col.tolist() if isinstance(col, np.ndarray) else col)
    for i, v in enumerate(values):
        if _is_missing(v) or isinstance(v, list | dict | tuple):
            raise DataError(
                f"feature {name!r} has a missing or unusable value at row {i}",
                field=f"{prefix}.{name}[{i}]",
                value=None if _is_missing(v) else repr(v),
                remedy=f"send one of the levels of {name!r} (a string) for every record",
            )
    return np.asarray([str(v) for v in values], dtype=object)
