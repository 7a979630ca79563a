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

from service.score_input import KEY_FIELD, PASSTHROUGH_FIELD
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

    ``X`` (1, p); ``outside`` the (feature, raw value) pairs outside the training range, in
    feature order; ``offset`` (1,) or None; ``inputs_json`` the score log's inputs object;
    ``key`` the raw ``key`` field (or None); ``passthrough`` the raw passthrough (or None).
    """

    X: np.ndarray
    outside: list[tuple[str, float]]
    offset: np.ndarray | None
    inputs_json: str
    key: Any
    passthrough: Any = None


class RecordPlan:
    """A version's encoding compiled for one record at a time (see the module docstring)."""

    def __init__(self, encoding: Encoding, inputs: Sequence[str], offset: str | None) -> None:
        self._p = len(encoding.term_names)
        self._features = [
            (f, encoding.term_groups[f.name][0], _range(f)) for f in encoding.features
        ]
        self._tables = {
            f.name: _level_rows(f) for f in encoding.features if f.kind == "categorical"
        }
        self._interactions = [
            (a, b, encoding.term_groups[f"{a}:{b}"]) for a, b in encoding.interactions
        ]
        self._in_interactions = frozenset(n for a, b in encoding.interactions for n in (a, b))
        self._inputs = tuple(inputs)
        self._known = frozenset(inputs).union((KEY_FIELD, PASSTHROUGH_FIELD))
        self._passthrough = PASSTHROUGH_FIELD not in self._inputs
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
            by_name = {name: record[name] for name in self._inputs}
        except KeyError:
            return None  # a missing feature: the general path names it
        if len(record) != len(self._inputs) and not self._known.issuperset(record):
            return None  # an unknown field: the general path names it
        x = np.zeros((1, self._p))
        row = x[0]
        row[0] = 1.0
        parts: dict[str, np.ndarray] = {}  # the columns of features that are in interactions
        outside: list[tuple[str, float]] = []
        for f, first, (lo, hi) in self._features:
            v = by_name[f.name]
            part: np.ndarray | None = None
            if f.kind == "categorical":
                part = self._tables[f.name].get(v) if type(v) is str else None
                if part is None:
                    return None  # not text, or an unseen level
                row[first : first + part.shape[0]] = part
            else:
                number = plain_number(v)
                if number is None or (f.transform == "log" and number <= 0.0):
                    return None
                if number < lo or number > hi:
                    outside.append((f.name, number))
                if f.transform is None and f.kind == "numeric":
                    row[first] = number
                else:  # numpy's own log and spline basis, as the general path calls them
                    xs = np.array([number])
                    xs = np.log(xs) if f.transform == "log" else xs
                    if f.kind == "spline":
                        with np.errstate(over="ignore"):  # a huge value: refused when predicted
                            part = np.concatenate([xs, spline_basis(xs, f.knots)[0]])
                    else:
                        part = xs
                    row[first : first + part.shape[0]] = part
            if f.name in self._in_interactions:
                parts[f.name] = part if part is not None else row[first : first + 1].copy()
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
            outside=outside,
            offset=offset,
            inputs_json=orjson.dumps(by_name).decode(),
            key=record.get(KEY_FIELD),
            passthrough=record.get(PASSTHROUGH_FIELD) if self._passthrough else None,
        )


def _level_rows(f: EncodedFeature) -> dict[str, np.ndarray]:
    """Level -> its treatment-coded row (k,) of 0.0/1.0 (the reference: all zeros)."""
    dummies = [lv for lv in f.levels if lv != f.reference]
    return {lv: np.array([float(lv == d) for d in dummies]) for lv in f.levels}


def _range(f: EncodedFeature) -> tuple[float, float]:
    """The training range ``[minimum, maximum]`` (raw scale; unbounded where unknown)."""
    lo = f.minimum if f.minimum is not None else -math.inf
    hi = f.maximum if f.maximum is not None else math.inf
    return lo, hi
