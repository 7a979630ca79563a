"""Frozen statistics dataclasses -> plain JSON values (NaN and infinities become ``None``)."""

from __future__ import annotations

import dataclasses
import math
from collections.abc import Mapping
from typing import Any

import numpy as np

__all__ = ["finite", "jsonable"]


def finite(value: float | None) -> float | None:
    """``value`` as a float, or ``None`` when it is missing, NaN or infinite."""
    if value is None:
        return None
    v = float(value)
    return v if math.isfinite(v) else None


def jsonable(obj: Any) -> Any:
    """Recursively turn dataclasses, tuples, numpy arrays and scalars into JSON values."""
    if dataclasses.is_dataclass(obj) and not isinstance(obj, type):
        return {f.name: jsonable(getattr(obj, f.name)) for f in dataclasses.fields(obj)}
    if isinstance(obj, Mapping):
        return {str(k): jsonable(v) for k, v in obj.items()}
    if isinstance(obj, np.ndarray):
        return [jsonable(v) for v in obj.tolist()]
    if isinstance(obj, list | tuple):
        return [jsonable(v) for v in obj]
    if isinstance(obj, bool | np.bool_):
        return bool(obj)
    if isinstance(obj, int | np.integer):
        return int(obj)
    if isinstance(obj, float | np.floating):
        return finite(float(obj))
    return obj
