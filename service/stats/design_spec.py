"""Validate a feature spec (list of mappings) before anything is learned from data.

Spec item keys: ``name`` (str), ``kind`` ("numeric" | "categorical" | "spline"),
``transform`` ("log", numeric and spline only), ``reference`` and ``levels``
(categorical only), ``knots`` (spline only: an int 3..7 for Harrell's default
quantiles, or a list of at least 3 increasing quantiles in (0, 1)).
Errors are :class:`SpecError` with ``field="spec.features[i].<key>"``.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from itertools import pairwise
from typing import Any

from service.errors import SpecError

from .splines import HARRELL_QUANTILES

__all__ = ["check_interactions", "check_spec"]

_KEYS = {
    "numeric": {"name", "kind", "transform"},
    "categorical": {"name", "kind", "reference", "levels"},
    "spline": {"name", "kind", "transform", "knots"},
}


def _fail(i: int, key: str, value: Any, message: str, remedy: str) -> SpecError:
    return SpecError(message, field=f"spec.features[{i}].{key}", value=value, remedy=remedy)


def _check_knots(i: int, knots: Any) -> tuple[float, ...]:
    if isinstance(knots, bool):
        raise _fail(i, "knots", knots, "knots must be a number or a list", "use e.g. 4")
    if isinstance(knots, int):
        if knots not in HARRELL_QUANTILES:
            raise _fail(i, "knots", knots, "a spline takes 3 to 7 knots", "use 3, 4 or 5 knots")
        return HARRELL_QUANTILES[knots]
    if isinstance(knots, Sequence) and not isinstance(knots, str):
        try:
            q = tuple(float(v) for v in knots)
        except (TypeError, ValueError):
            msg = "knot quantiles must be numbers"
            raise _fail(i, "knots", knots, msg, "e.g. [0.1, 0.5, 0.9]") from None
        ok = len(q) >= 3 and all(0 < v < 1 for v in q) and all(a < b for a, b in pairwise(q))
        if not ok:
            raise _fail(
                i,
                "knots",
                list(q),
                "knot quantiles must be at least 3 strictly increasing values in (0, 1)",
                "e.g. [0.1, 0.5, 0.9]",
            )
        return q
    raise _fail(i, "knots", knots, "knots must be an int (3..7) or a list", "use e.g. 4")


def check_spec(spec: Sequence[Mapping[str, Any]]) -> list[dict[str, Any]]:
    """Normalised copies of the spec items (knots resolved to quantiles)."""
    if isinstance(spec, Mapping | str) or not isinstance(spec, Sequence) or not spec:
        raise SpecError(
            "the feature spec must be a non-empty list of features",
            field="spec.features",
            value=repr(spec)[:100],
            remedy='send e.g. [{"name": "age", "kind": "numeric"}]',
        )
    out: list[dict[str, Any]] = []
    seen: set[str] = set()
    for i, item in enumerate(spec):
        if not isinstance(item, Mapping):
            raise SpecError(
                "each feature must be an object",
                field=f"spec.features[{i}]",
                value=repr(item)[:100],
                remedy='use {"name": ..., "kind": ...}',
            )
        name = item.get("name")
        if not isinstance(name, str) or not name or any(c in name for c in ":='\n"):
            raise _fail(
                i,
                "name",
                name,
                "feature name must be a non-empty string",
                "avoid ':', '=' and quotes",
            )
        if name in seen or name == "intercept":
            raise _fail(
                i, "name", name, f"feature name {name!r} is repeated or reserved", "rename it"
            )
        seen.add(name)
        kind = item.get("kind")
        if kind not in _KEYS:
            raise _fail(
                i, "kind", kind, "unknown feature kind", 'use "numeric", "categorical" or "spline"'
            )
        extra = sorted(set(item) - _KEYS[kind])
        if extra:
            raise _fail(
                i,
                extra[0],
                item[extra[0]],
                f"{extra[0]!r} does not apply to a {kind} feature",
                "remove it",
            )
        transform = item.get("transform")
        if transform is not None and transform != "log":
            raise _fail(i, "transform", transform, "unknown transform", 'use "log" or leave it out')
        norm: dict[str, Any] = {"name": name, "kind": kind, "transform": transform}
        if kind == "spline":
            norm["knot_quantiles"] = _check_knots(i, item.get("knots", 4))
        if kind == "categorical":
            levels = item.get("levels")
            if levels is not None:
                if isinstance(levels, str) or not isinstance(levels, Sequence) or len(levels) < 2:
                    raise _fail(
                        i, "levels", levels, "levels must list at least 2 values", 'e.g. ["a", "b"]'
                    )
                levels = [str(v) for v in levels]
                if len(set(levels)) != len(levels):
                    raise _fail(i, "levels", levels, "levels are repeated", "list each level once")
            norm["levels"] = levels
            ref = item.get("reference")
            norm["reference"] = None if ref is None else str(ref)
            if levels is not None and ref is not None and str(ref) not in levels:
                raise _fail(
                    i, "reference", ref, "reference is not among the levels", f"use one of {levels}"
                )
        out.append(norm)
    return out


def check_interactions(
    interactions: Sequence[Sequence[str]], names: Sequence[str]
) -> tuple[tuple[str, str], ...]:
    """Validated pairs of distinct, known feature names (no repeats)."""
    pairs: list[tuple[str, str]] = []
    for j, pair in enumerate(interactions):
        ok = (
            isinstance(pair, Sequence)
            and not isinstance(pair, str)
            and len(pair) == 2
            and all(isinstance(v, str) and v in names for v in pair)
            and pair[0] != pair[1]
        )
        if not ok:
            raise SpecError(
                "an interaction is a pair of two different features of the spec",
                field=f"spec.interactions[{j}]",
                value=repr(pair)[:100],
                remedy=f"use two names out of {list(names)}",
            )
        a, b = str(pair[0]), str(pair[1])
        if (a, b) in pairs or (b, a) in pairs:
            raise SpecError(
                "interaction listed twice",
                field=f"spec.interactions[{j}]",
                value=[a, b],
                remedy="list each pair once",
            )
        pairs.append((a, b))
    return tuple(pairs)
