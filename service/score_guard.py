"""Values a version refuses to score, and answers that would not be numbers.

**Extrapolation guard.** A numeric or spline feature fitted on values in ``[min, max]`` (raw
scale, before any log) has the training width ``w = max - min`` (``w = max(|min|, 1)`` when
the training values were all equal). With the limit ``k`` (the setting
``RISKFIT_EXTRAPOLATION_LIMIT``, default 10), a value ``x`` is refused (422) when

    x < min - k * w    or    x > max + k * w

Values outside ``[min, max]`` but inside those bounds are scored with an extrapolation
warning, as before. ``k = 0`` turns the guard off. The check is one pair of array comparisons
per feature (:func:`check_columns`); the one-record path only looks at values already
found outside the training range (:meth:`ExtrapolationGuard.exceeds`).

**Unscorable results.** Whatever the guard, the answer's ``eta`` and ``se_eta`` are finite
numbers or the record is refused: :func:`checked_predict` names the record and the feature
whose value made the design row, the linear predictor or its standard error overflow
(``probability`` and the interval are ``expit`` of finite numbers, so they lie in [0, 1]).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

from service.errors import DataError
from service.stats.design import Encoding
from service.stats.predict import Prediction, all_finite, predict

__all__ = [
    "DEFAULT_EXTRAPOLATION_LIMIT",
    "ExtrapolationGuard",
    "Where",
    "check_columns",
    "checked_predict",
    "extrapolation_warning",
    "guard_of",
    "warnings_of",
]

_NO_WARNINGS: tuple[str, ...] = ()
DEFAULT_EXTRAPOLATION_LIMIT = 10.0  # as service.config.Settings.extrapolation_limit
_TAME = 1e150  # design entries below this cannot overflow eta or x'Vx for sane coefficients
_FEW = 8
_SETTING = "RISKFIT_EXTRAPOLATION_LIMIT"

#: (feature or offset name, row) -> (field path of the request, raw value sent)
Where = Callable[[str, int], tuple[str, Any]]


@dataclass(frozen=True)
class ExtrapolationGuard:
    """Per guarded feature: ``name -> (min, max, lowest allowed, highest allowed)``."""

    limit: float
    bounds: dict[str, tuple[float, float, float, float]]

    def exceeds(self, pairs: Sequence[tuple[str, float]]) -> bool:
        """Whether any ``(feature, value)`` pair lies beyond the guard's bounds."""
        for name, x in pairs:
            b = self.bounds.get(name)
            if b is not None and not b[2] <= x <= b[3]:
                return True
        return False


def guard_of(encoding: Encoding, limit: float) -> ExtrapolationGuard:
    """The guard of ``encoding``'s numeric and spline features for ``limit`` (0: none)."""
    bounds: dict[str, tuple[float, float, float, float]] = {}
    if limit > 0.0:
        for f in encoding.features:
            if f.kind == "categorical" or f.minimum is None or f.maximum is None:
                continue
            lo, hi = f.minimum, f.maximum
            width = hi - lo if hi > lo else max(abs(lo), 1.0)
            bounds[f.name] = (lo, hi, lo - limit * width, hi + limit * width)
    return ExtrapolationGuard(limit, bounds)


def check_columns(guard: ExtrapolationGuard, cols: Mapping[str, np.ndarray], where: Where) -> None:
    """Refuse the first record (lowest row) holding a value beyond the guard (vectorised)."""
    first: tuple[int, str] | None = None
    for name, (_, _, lo, hi) in guard.bounds.items():
        x = cols.get(name)
        if x is None:
            continue
        bad = (x < lo) | (x > hi)
        if bad.any():
            i = int(np.argmax(bad))
            if first is None or i < first[0]:
                first = (i, name)
    if first is not None:
        raise _beyond(guard, first[1], first[0], where)


def _beyond(guard: ExtrapolationGuard, name: str, i: int, where: Where) -> DataError:
    lo, hi, lo_k, hi_k = guard.bounds[name]
    field, value = where(name, i)
    x = float(value)
    width = (lo_k - lo) / -guard.limit
    side, dist = ("above", (x - hi) / width) if x > hi else ("below", (lo - x) / width)
    return DataError(
        f"record {i}: {name}={x:g} lies {dist:.3g} training ranges {side} the training range "
        f"[{lo:g}, {hi:g}] of {name}; this version scores values from {lo_k:g} to {hi_k:g} "
        f"({guard.limit:g} training ranges either side): the model says nothing about values "
        "that far out",
        field=field,
        value=value,
        remedy=f"check the value and its units; to score it anyway, refit with data covering "
        f"it, or raise the server setting {_SETTING} (0 turns the guard off)",
        details={
            "record": i,
            "feature": name,
            "training_range": [lo, hi],
            "allowed_range": [lo_k, hi_k],
            "extrapolation_limit": guard.limit,
        },
    )


def checked_predict(
    X: np.ndarray,
    encoding: Encoding,
    coef: np.ndarray,
    cov: np.ndarray,
    *,
    offset: np.ndarray | None,
    offset_name: str | None,
    confidence_level: float,
    where: Where,
) -> Prediction:
    """:func:`~service.stats.predict.predict`, refusing a record whose design row, ``eta``
    or ``se_eta`` is not a finite number (it names the feature with the largest entry)."""
    try:
        if X.shape[0] <= _FEW and max(map(abs, X.ravel().tolist())) < _TAME:  # the 1-record path
            pred = predict(X, coef, cov, offset=offset, confidence_level=confidence_level)
        else:
            with np.errstate(over="ignore", invalid="ignore"):  # non-finite results refused below
                pred = predict(X, coef, cov, offset=offset, confidence_level=confidence_level)
    except DataError:
        bad = ~np.isfinite(X).all(axis=1)
        if not bad.any():
            raise
        raise _unscorable(X, int(np.argmax(bad)), encoding, offset, offset_name, where) from None
    if not (all_finite(pred.eta) and all_finite(pred.se_eta)):
        i = int(np.argmin(np.isfinite(pred.eta) & np.isfinite(pred.se_eta)))
        raise _unscorable(X, i, encoding, offset, offset_name, where)
    return pred


def _unscorable(
    X: np.ndarray,
    i: int,
    encoding: Encoding,
    offset: np.ndarray | None,
    offset_name: str | None,
    where: Where,
) -> DataError:
    """The refusal of record ``i``, naming the input with the largest design entry."""
    row = np.nan_to_num(np.abs(X[i]), nan=np.inf)
    sizes = {
        f.name: float(row[idx[0] : idx[-1] + 1].max())
        for f in encoding.features
        if f.kind != "categorical" and (idx := encoding.term_groups[f.name])
    }
    if offset is not None and offset_name is not None:
        sizes[offset_name] = abs(float(offset[i]))
    name = max(sizes, key=sizes.__getitem__) if sizes else encoding.features[0].name
    field, value = where(name, i)
    return DataError(
        f"record {i} cannot be scored: with {name}={value!r} its linear predictor or the "
        "standard error overflows (is not a finite number)",
        field=field,
        value=value,
        remedy=f"check the value and its units; the server setting {_SETTING} (now off or "
        "generous) refuses such values earlier with the training range",
        details={"record": i, "feature": name},
    )


def extrapolation_warning(name: str, value: float, ranges: Mapping[str, Any]) -> str:
    """The warning of a value outside the training range (but within the guard)."""
    r = ranges.get(name, {})
    return (
        f"extrapolation: {name}={value:g} is outside the training "
        f"range [{r.get('min', float('nan')):g}, {r.get('max', float('nan')):g}]"
    )


def warnings_of(
    n: int,
    extrapolated: Mapping[str, np.ndarray],
    cols: Mapping[str, np.ndarray],
    ranges: Mapping[str, Any],
) -> list[Any]:
    """Each of ``n`` records' warning texts (``extrapolated``: feature -> (n,) bool)."""
    out: list[Any] = [_NO_WARNINGS] * n
    for name, mask in extrapolated.items():
        for i in np.flatnonzero(mask):
            text = extrapolation_warning(name, float(cols[name][i]), ranges)
            out[int(i)] = [*out[int(i)], text]
    return out
