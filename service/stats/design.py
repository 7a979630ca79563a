"""From a feature spec and raw columns to a design matrix, reproducibly.

:func:`learn_encoding` freezes everything learned from training data (levels,
reference level, spline knots, training ranges) into an :class:`Encoding`, a
plain object whose ``to_dict()`` is JSON-ready and is stored with each model
version; :func:`design_matrix` rebuilds exactly the same columns at scoring.

Columns and term names, in order (column 0 is always ``intercept``):

* numeric ``x``: one column ``x`` (``log(x)`` if ``transform: "log"``; the name stays ``x``);
* categorical ``g``: treatment (dummy) coding, one column ``g=level`` per
  non-reference level, in level order (levels sorted as strings unless the spec
  lists them; reference = the spec's ``reference`` or the first level);
* spline ``x`` with k knots: ``x`` (linear part) and ``x_s1 .. x_s{k-2}``
  (:mod:`service.stats.splines`), knots on the (transformed) scale;
* interaction ``a:b``: every product of a column of ``a`` with a column of ``b``,
  named ``<term of a>:<term of b>`` (Wilkinson & Rogers 1973 notation).

``term_groups`` maps each feature name and each ``"a:b"`` to its column indices,
for likelihood-ratio tests that drop all columns of a feature together.
Numeric and spline values outside the training range ``[min, max]`` (raw scale)
are flagged in ``Design.extrapolated``, not refused.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import asdict, dataclass
from typing import Any, Literal

import numpy as np

from service.errors import DataError, SpecError, UnseenLevelError

from .columns import CodedLabels, coded_labels, get_column, numbers
from .design_spec import check_interactions, check_spec
from .splines import knots_at_quantiles, spline_basis

__all__ = [
    "Design",
    "EncodedFeature",
    "Encoding",
    "FeatureFacts",
    "FeatureKind",
    "design_matrix",
    "encoding_from_facts",
    "learn_encoding",
]

FeatureKind = Literal["numeric", "categorical", "spline"]
Columns = Mapping[str, np.ndarray | Sequence[Any] | CodedLabels]  # categorical: coded too


@dataclass(frozen=True)
class EncodedFeature:
    """One feature as learned at fit time."""

    name: str
    kind: str
    transform: str | None = None
    levels: tuple[str, ...] = ()  # categorical: all levels, reference included
    reference: str | None = None
    knots: tuple[float, ...] = ()  # spline: on the transformed scale
    minimum: float | None = None  # numeric / spline: training range, raw scale
    maximum: float | None = None

    @property
    def terms(self) -> tuple[str, ...]:
        if self.kind == "categorical":
            return tuple(f"{self.name}={lv}" for lv in self.levels if lv != self.reference)
        if self.kind == "spline":
            return (self.name, *(f"{self.name}_s{j}" for j in range(1, len(self.knots) - 1)))
        return (self.name,)


@dataclass(frozen=True)
class Encoding:
    features: tuple[EncodedFeature, ...]
    interactions: tuple[tuple[str, str], ...]
    term_names: tuple[str, ...]
    term_groups: dict[str, tuple[int, ...]]

    def to_dict(self) -> dict[str, Any]:
        """Plain JSON types only (lists, str, float, None)."""
        feats = []
        for f in self.features:
            d = asdict(f)
            d["levels"], d["knots"] = list(f.levels), list(f.knots)
            feats.append(d)
        return {
            "format": 1,
            "features": feats,
            "interactions": [list(p) for p in self.interactions],
            "term_names": list(self.term_names),
            "term_groups": {k: list(v) for k, v in self.term_groups.items()},
        }

    @classmethod
    def from_dict(cls, d: Mapping[str, Any]) -> Encoding:
        """Inverse of :meth:`to_dict`; SpecError if the dict is not one."""
        try:
            feats = tuple(
                EncodedFeature(
                    name=str(f["name"]),
                    kind=str(f["kind"]),
                    transform=f.get("transform"),
                    levels=tuple(str(v) for v in f.get("levels", ())),
                    reference=f.get("reference"),
                    knots=tuple(float(v) for v in f.get("knots", ())),
                    minimum=None if f.get("minimum") is None else float(f["minimum"]),
                    maximum=None if f.get("maximum") is None else float(f["maximum"]),
                )
                for f in d["features"]
            )
            inter = tuple((str(a), str(b)) for a, b in d.get("interactions", ()))
        except (KeyError, TypeError, ValueError) as exc:
            raise SpecError(
                "stored encoding is malformed",
                field="encoding",
                value=repr(exc),
                remedy="rebuild the encoding with learn_encoding",
            ) from exc
        enc = _assemble(feats, inter)
        if list(enc.term_names) != list(d.get("term_names", enc.term_names)):
            raise SpecError(
                "stored encoding's term names do not match its features",
                field="encoding.term_names",
                value=list(d.get("term_names", [])),
                remedy="rebuild the encoding with learn_encoding",
            )
        return enc


@dataclass(frozen=True)
class Design:
    X: np.ndarray  # (n, p) float64, C-contiguous
    extrapolated: dict[str, np.ndarray]  # feature -> (n,) bool, outside the training range


def _assemble(feats: tuple[EncodedFeature, ...], inter: tuple[tuple[str, str], ...]) -> Encoding:
    names = ["intercept"]
    groups: dict[str, tuple[int, ...]] = {}
    by_name = {f.name: f for f in feats}
    for f in feats:
        groups[f.name] = tuple(range(len(names), len(names) + len(f.terms)))
        names.extend(f.terms)
    for a, b in inter:
        if a not in by_name or b not in by_name:
            raise SpecError(
                "interaction names an unknown feature",
                field="encoding.interactions",
                value=[a, b],
                remedy="rebuild the encoding",
            )
        terms = [f"{ta}:{tb}" for ta in by_name[a].terms for tb in by_name[b].terms]
        groups[f"{a}:{b}"] = tuple(range(len(names), len(names) + len(terms)))
        names.extend(terms)
    return Encoding(feats, inter, tuple(names), groups)


def _learn_categorical(item: dict[str, Any], col: Any, prefix: str, i: int) -> EncodedFeature:
    seen = sorted(coded_labels(col, item["name"], prefix).levels)
    return _categorical_from_seen(item, seen, prefix, i)


def _categorical_from_seen(
    item: dict[str, Any], seen: list[str], prefix: str, i: int
) -> EncodedFeature:
    name = item["name"]
    levels = item["levels"] or seen
    unknown = sorted(set(seen) - set(levels))
    if unknown:
        raise UnseenLevelError(
            f"feature {name!r} has value {unknown[0]!r}, which is not among the listed levels",
            field=f"{prefix}.{name}",
            value=unknown[0],
            remedy=f"add it to spec.features[{i}].levels or fix the data",
        )
    absent = [lv for lv in levels if lv not in set(seen)]
    if absent or len(levels) < 2:
        raise DataError(
            f"feature {name!r}: level {absent[0]!r} has no rows"
            if absent
            else f"feature {name!r} has a single level",
            field=f"{prefix}.{name}",
            value=absent[0] if absent else levels[0],
            remedy="drop the level from the spec, merge it with another, or drop the feature",
        )
    ref = item["reference"] if item["reference"] is not None else levels[0]
    if ref not in levels:
        raise SpecError(
            f"reference {ref!r} of {name!r} is not a level in the data",
            field=f"spec.features[{i}].reference",
            value=ref,
            remedy=f"use one of {levels}",
        )
    return EncodedFeature(name, "categorical", levels=tuple(levels), reference=ref)


def _learn_numeric(item: dict[str, Any], col: Any, prefix: str, i: int) -> EncodedFeature:
    name, log = item["name"], item["transform"] == "log"
    raw = numbers(col, name, prefix)
    x = numbers(raw, name, prefix, log=log)
    knots: tuple[float, ...] = ()
    if item["kind"] == "spline":
        knots = knots_at_quantiles(x, item["knot_quantiles"])
    # the count only goes into the error of a spline with too few knots (a sort of the column)
    short = item["kind"] == "spline" and len(knots) < 3
    distinct = f"{np.unique(x).size} distinct values" if short else ""
    return _numeric_from_facts(
        item,
        FeatureFacts(knots=knots, minimum=float(raw.min()), maximum=float(raw.max())),
        prefix,
        i,
        distinct,
    )


def _numeric_from_facts(
    item: dict[str, Any], facts: FeatureFacts, prefix: str, i: int, distinct: str
) -> EncodedFeature:
    name = item["name"]
    if item["kind"] == "spline" and len(facts.knots) < 3:
        raise DataError(
            f"feature {name!r} has too few distinct values for a spline",
            field=f"{prefix}.{name}",
            value=distinct,
            remedy=f"use fewer knots in spec.features[{i}].knots or make it numeric",
        )
    return EncodedFeature(
        name,
        item["kind"],
        item["transform"],
        knots=facts.knots,
        minimum=facts.minimum,
        maximum=facts.maximum,
    )


@dataclass(frozen=True)
class FeatureFacts:
    """What learning one feature needs, however it was gathered (in memory or streamed).

    Categorical: ``levels``, the distinct values seen, sorted as strings. Numeric and
    spline: the raw ``minimum`` and ``maximum``; spline: ``knots``, the distinct values of
    ``np.quantile`` (linear) at the spec's knot quantiles on the transformed scale.
    """

    levels: tuple[str, ...] = ()
    minimum: float | None = None
    maximum: float | None = None
    knots: tuple[float, ...] = ()


def encoding_from_facts(
    spec: Sequence[Mapping[str, Any]],
    facts: Mapping[str, FeatureFacts],
    interactions: Sequence[Sequence[str]] = (),
    *,
    prefix: str = "data.columns",
) -> Encoding:
    """:func:`learn_encoding` from pre-gathered facts per feature (e.g. a streaming pass).

    Applies the same checks (unknown and absent levels, reference, spline knots) and gives
    the same :class:`Encoding` as :func:`learn_encoding` on the full columns.
    """
    items = check_spec(spec)
    inter = check_interactions(interactions, [it["name"] for it in items])
    feats = []
    for i, item in enumerate(items):
        f = facts[item["name"]]
        if item["kind"] == "categorical":
            feats.append(_categorical_from_seen(item, list(f.levels), prefix, i))
        else:
            distinct = f"{len(f.knots)} distinct knot values"
            feats.append(_numeric_from_facts(item, f, prefix, i, distinct))
    return _assemble(tuple(feats), inter)


def learn_encoding(
    spec: Sequence[Mapping[str, Any]],
    columns: Columns,
    interactions: Sequence[Sequence[str]] = (),
) -> Encoding:
    """Learn levels, knots and ranges from training ``columns`` (feature name -> values)."""
    items = check_spec(spec)
    inter = check_interactions(interactions, [it["name"] for it in items])
    prefix = "data.columns"
    n = None
    feats = []
    for i, item in enumerate(items):
        col = get_column(columns, item["name"], prefix, n)
        n = len(col)
        learn = _learn_categorical if item["kind"] == "categorical" else _learn_numeric
        feats.append(learn(item, col, prefix, i))
    if not n:
        raise DataError("no rows to learn from", field=prefix, value=0, remedy="send training data")
    return _assemble(tuple(feats), inter)


class _Dummies:
    """Treatment-coded columns of a categorical feature, built per slice of rows on demand.

    ``table`` (levels, k) holds each level's row of 0/1 (the reference: all 0); row ``i`` of
    the dummies is ``table[code[i]]``.
    """

    def __init__(self, code: np.ndarray, table: np.ndarray) -> None:
        self.code, self.table = code, table

    def rows(self, sl: slice) -> np.ndarray:
        return np.take(self.table, self.code[sl], axis=0)  # faster than table[code] for 2-d


_Part = np.ndarray | _Dummies  # one feature's (n, k) columns, or their coded form
_FILL_ROWS = 16384  # rows of X filled at a time, so that their cache lines are written once


def _rows(part: _Part, sl: slice) -> np.ndarray:
    return part.rows(sl) if isinstance(part, _Dummies) else part[sl]


def _feature_columns(f: EncodedFeature, col: Any, prefix: str) -> tuple[_Part, np.ndarray | None]:
    """(n, k) columns of one feature and its extrapolation mask (None for categorical)."""
    if f.kind == "categorical":
        coded = coded_labels(col, f.name, prefix)
        index = {lv: j for j, lv in enumerate(f.levels)}
        unseen = sorted(lv for lv in coded.levels if lv not in index)
        if unseen:
            u = unseen[0]
            row = int(np.flatnonzero(coded.codes == coded.levels.index(u))[0])
            raise UnseenLevelError(
                f"feature {f.name!r} has level {u!r} (row {row}), unseen at fit time",
                field=f"{prefix}.{f.name}[{row}]",
                value=u,
                remedy=f"use one of {list(f.levels)}",
            )
        dummies = [lv for lv in f.levels if lv != f.reference]
        # one row of 0/1 per level of the data, in the data's code order
        table = np.array([[float(lv == d) for d in dummies] for lv in coded.levels])
        return _Dummies(coded.codes, table.reshape(len(coded.levels), len(dummies))), None
    raw = numbers(col, f.name, prefix)
    x = numbers(raw, f.name, prefix, log=f.transform == "log")
    mask = (raw < (f.minimum if f.minimum is not None else -np.inf)) | (
        raw > (f.maximum if f.maximum is not None else np.inf)
    )
    if f.kind == "spline":
        return np.column_stack([x, spline_basis(x, f.knots)]), mask
    return x[:, None], mask


def design_matrix(
    encoding: Encoding, columns: Columns, *, field_prefix: str = "data.columns"
) -> Design:
    """The (n, p) design matrix of ``encoding`` for raw ``columns``.

    ``X`` is filled :data:`_FILL_ROWS` rows at a time (all its columns for those rows), so a
    large matrix is written once, row-major, instead of once per column with a stride.
    """
    n = None
    parts: dict[str, _Part] = {}
    extrapolated: dict[str, np.ndarray] = {}
    for f in encoding.features:
        col = get_column(columns, f.name, field_prefix, n)
        n = len(col)
        parts[f.name], mask = _feature_columns(f, col, field_prefix)
        if mask is not None:
            extrapolated[f.name] = mask
    n = n or 0
    X = np.empty((n, len(encoding.term_names)))
    for lo in range(0, n, _FILL_ROWS):
        sl = slice(lo, min(lo + _FILL_ROWS, n))
        Xc = X[sl]
        Xc[:, 0] = 1.0
        for f in encoding.features:
            idx = encoding.term_groups[f.name]
            Xc[:, idx[0] : idx[-1] + 1] = _rows(parts[f.name], sl)
        for a, b in encoding.interactions:
            idx = encoding.term_groups[f"{a}:{b}"]
            pa_, pb = _rows(parts[a], sl), _rows(parts[b], sl)
            Xc[:, idx[0] : idx[-1] + 1] = (pa_[:, :, None] * pb[:, None, :]).reshape(
                Xc.shape[0], -1
            )
    return Design(X, extrapolated)
