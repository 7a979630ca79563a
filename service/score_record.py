"""One record's design row from a version compiled once: no column machinery per request.

A single-record score request is mostly fixed cost: the general path
(:func:`service.stats.design.design_matrix` on columns of length 1, with the column coercion of
:mod:`service.data_io`) spends most of its time on per-column set-up. :class:`RecordPlan`
does that set-up once per version and then turns ``record -> x`` (1, p) directly:

* numeric ``v`` (an ``int`` up to 2**53 in size or a finite ``float``, not a ``bool``):
  ``x[j] = v``, or ``log(v)`` (``v > 0``) computed by ``np.log`` on a length-1 array, the call
  the general path makes for one record;
* spline: ``[x, spline_basis(x, knots)]`` from :func:`service.stats.splines.spline_basis`;
* categorical ``v`` (a ``str`` among the fitted levels): the treatment-coded 0/1 row of that
  level, looked up in a table built once;
* interaction ``a:b``: the products of ``a``'s and ``b``'s columns (``a``-major), each one
  IEEE multiplication as in the general path.

Every value the plan is not sure about (another type, a missing feature, a non-positive value
under a log, an unseen level, an offset that is not a plain number) makes :meth:`design` return
``None``: the caller then takes the general path, which refuses the record with its own error
naming the field. So the plan never words an error and gives bit-identical rows (the tests
compare it with the general path and with statsmodels).
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import orjson

from service.stats.design import EncodedFeature, Encoding
from service.stats.splines import spline_basis

__all__ = ["RecordDesign", "RecordPlan"]

_KINDS = frozenset({"numeric", "spline", "categorical"})
_EXACT_INT = 2**53  # |int| up to this converts to float64 exactly, as numpy's cast does


def plain_number(v: Any) -> float | None:
    """``v`` as a float if it is a finite JSON number the general path takes as is, else None."""
    t = type(v)  # exact types: bool is an int subclass, and the general path refuses it
    if t is float:
        return v if math.isfinite(v) else None
    if t is int and -_EXACT_INT <= v <= _EXACT_INT:
        return float(v)
    return None


@dataclass(frozen=True)
class RecordDesign:
    """One record ready for :func:`service.stats.predict.predict`.

    ``X`` (1, p); ``extrapolated`` feature -> (1,) bool, outside the training range;
    ``raw`` feature -> (1,) float64 raw value (for warning texts); ``offset`` (1,) or None;
    ``inputs_json`` the score log's inputs object; ``key`` the raw ``key`` field (or None).
    """

    X: np.ndarray
    extrapolated: dict[str, np.ndarray]
    raw: dict[str, np.ndarray]
    offset: np.ndarray | None
    inputs_json: str
    key: Any


class RecordPlan:
    """A version's encoding compiled for one record at a time (see the module docstring)."""

    def __init__(self, encoding: Encoding, inputs: Sequence[str], offset: str | None) -> None:
        self._p = len(encoding.term_names)
        self._features = [(f, encoding.term_groups[f.name]) for f in encoding.features]
        self._tables = {
            f.name: _level_rows(f) for f in encoding.features if f.kind == "categorical"
        }
        self._interactions = [
            (a, b, encoding.term_groups[f"{a}:{b}"]) for a, b in encoding.interactions
        ]
        self._inputs = tuple(inputs)
        self._offset = offset
        # Anything this plan does not know (a new kind or transform, an offset that is also
        # a feature) leaves it off: every record then takes the general path.
        self.enabled = len(set(self._inputs)) == len(self._inputs) and all(
            f.kind in _KINDS and f.transform in (None, "log") for f in encoding.features
        )

    def design(self, record: Mapping[str, Any]) -> RecordDesign | None:
        """The record's design row and log inputs, or None: take the general path."""
        if not self.enabled:
            return None
        try:
            values = [record[name] for name in self._inputs]
        except KeyError:
            return None  # a missing feature: the general path names it
        x = np.empty((1, self._p))
        x[0, 0] = 1.0
        row = x[0]
        parts: dict[str, np.ndarray] = {}
        extrapolated: dict[str, np.ndarray] = {}
        raw: dict[str, np.ndarray] = {}
        by_name = dict(zip(self._inputs, values, strict=True))
        for f, idx in self._features:
            v = by_name[f.name]
            if f.kind == "categorical":
                level = self._tables[f.name].get(v) if type(v) is str else None
                if level is None:
                    return None  # not text, or an unseen level
                part = level
            else:
                number = plain_number(v)
                if number is None or (f.transform == "log" and number <= 0.0):
                    return None
                r = np.array([number])
                xs = np.log(r) if f.transform == "log" else r
                part = (
                    np.concatenate([xs, spline_basis(xs, f.knots)[0]]) if f.kind == "spline" else xs
                )
                raw[f.name] = r
                extrapolated[f.name] = _outside(r, f)
            row[idx[0] : idx[-1] + 1] = part
            parts[f.name] = part
        for a, b, idx in self._interactions:
            row[idx[0] : idx[-1] + 1] = (parts[a][:, None] * parts[b][None, :]).ravel()
        offset = None
        if self._offset is not None:
            number = plain_number(by_name[self._offset])
            if number is None:
                return None
            offset = np.array([number])
        return RecordDesign(
            X=x,
            extrapolated=extrapolated,
            raw=raw,
            offset=offset,
            inputs_json=orjson.dumps(by_name).decode(),
            key=record.get("key"),
        )


def _level_rows(f: EncodedFeature) -> dict[str, np.ndarray]:
    """Level -> its treatment-coded row (k,) of 0.0/1.0 (the reference: all zeros)."""
    dummies = [lv for lv in f.levels if lv != f.reference]
    return {lv: np.array([float(lv == d) for d in dummies]) for lv in f.levels}


def _outside(r: np.ndarray, f: EncodedFeature) -> np.ndarray:
    """(1,) bool: the raw value lies outside the training range ``[minimum, maximum]``."""
    lo = f.minimum if f.minimum is not None else -np.inf
    hi = f.maximum if f.maximum is not None else np.inf
    out: np.ndarray = (r < lo) | (r > hi)
    return out
