"""Validation of the arrays the monitoring statistics take: outcomes, probabilities, weights.

Shared by discrimination, calibration, cusum and updating so every function rejects bad
input with the same :class:`~service.errors.DataError` naming the field, the value and the
remedy. Weights are *frequency* weights throughout: a weight of 2 counts a record twice.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import ArrayLike, NDArray

from service.errors import DataError, NotEnoughOutcomesError

FloatArray = NDArray[np.float64]

#: Probabilities are clipped into [PROB_FLOOR, 1 - PROB_FLOOR] before taking logits or logs,
#: so a score of exactly 0 or 1 (float64 rounding of |eta| > 37) stays finite.
PROB_FLOOR = 1e-12


def as_outcomes(y: ArrayLike, field: str = "y") -> FloatArray:
    """Return ``y`` as a 1-D float64 array of 0/1 values, or raise DataError."""
    arr = np.asarray(y, dtype=np.float64)
    if arr.ndim != 1:
        raise DataError(
            f"{field} must be one-dimensional",
            field=field,
            value=f"shape {arr.shape}",
            remedy="pass one outcome (0 or 1) per record",
        )
    bad = ~((arr == 0.0) | (arr == 1.0))
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise DataError(
            f"{field} must hold only 0 and 1",
            field=f"{field}[{i}]",
            value=float(arr[i]),
            remedy="code the outcome as 1 for an event and 0 otherwise",
        )
    return arr


def as_probabilities(p: ArrayLike, n: int, field: str = "p") -> FloatArray:
    """Return ``p`` as a 1-D float64 array of length ``n`` with values in [0, 1]."""
    arr = np.asarray(p, dtype=np.float64)
    if arr.shape != (n,):
        raise DataError(
            f"{field} must have one value per outcome",
            field=field,
            value=f"shape {arr.shape}, expected ({n},)",
            remedy="align predictions with outcomes",
        )
    bad = ~((arr >= 0.0) & (arr <= 1.0))  # also catches NaN
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise DataError(
            f"{field} must be probabilities in [0, 1]",
            field=f"{field}[{i}]",
            value=float(arr[i]),
            remedy="pass predicted probabilities, not logits or scores",
        )
    return arr


def as_weights(weights: ArrayLike | None, n: int, field: str = "weights") -> FloatArray | None:
    """``None``, or (n,) float64 finite non-negative weights with a positive sum."""
    if weights is None:
        return None
    arr = np.asarray(weights, dtype=np.float64)
    if arr.shape != (n,):
        raise DataError(
            f"{field} must have one value per outcome",
            field=field,
            value=f"shape {arr.shape}, expected ({n},)",
            remedy="pass one weight per record",
        )
    bad = ~(np.isfinite(arr) & (arr >= 0.0))
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise DataError(
            f"{field} must be finite and non-negative",
            field=f"{field}[{i}]",
            value=float(arr[i]),
            remedy="use frequency weights >= 0",
        )
    if not arr.sum() > 0.0:
        raise DataError(
            f"{field} sum to zero", field=field, value=0.0, remedy="give some records weight > 0"
        )
    return arr


def clipped_logit(p: FloatArray) -> FloatArray:
    """logit(p) with p clipped into [PROB_FLOOR, 1 - PROB_FLOOR]; shape (n,)."""
    q = np.clip(p, PROB_FLOOR, 1.0 - PROB_FLOOR)
    return np.log(q) - np.log1p(-q)


def weighted_sum(values: FloatArray, weights: FloatArray | None) -> float:
    """sum(w * values), with w = 1 when ``weights`` is None."""
    return float(values.sum() if weights is None else weights @ values)


def require_outcomes(
    n: int, events: float, sum_weights: float, *, min_outcomes: int, min_events: int, what: str
) -> None:
    """Raise NotEnoughOutcomesError unless n >= min_outcomes and both classes >= min_events.

    ``details`` = {"n", "events", "non_events", "required": {"n", "events", "non_events"}}.
    """
    non_events = sum_weights - events
    if n >= min_outcomes and events >= min_events and non_events >= min_events:
        return
    raise NotEnoughOutcomesError(
        f"not enough outcomes for {what}: {n} outcomes, {events:g} events, "
        f"{non_events:g} non-events",
        field="window",
        value=n,
        remedy="widen the window or wait for more outcomes",
        details={
            "n": n,
            "events": events,
            "non_events": non_events,
            "required": {"n": min_outcomes, "events": min_events, "non_events": min_events},
        },
    )
