"""Read one raw input column as numbers or as categorical labels, with clear errors.

Every error names the feature (``field`` is ``<prefix>.<name>[row]``), the
offending value and a remedy. Categorical labels are compared as strings
(``str(value)``); ``None`` and NaN are missing values, never a level.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np

from service.errors import DataError, MissingFeatureError

__all__ = ["get_column", "labels", "numbers"]


def get_column(
    columns: Mapping[str, np.ndarray | Sequence[Any]], name: str, prefix: str, n: int | None
) -> np.ndarray | Sequence[Any]:
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
