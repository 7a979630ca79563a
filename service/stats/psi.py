"""Reference distributions of input features and the population stability index (PSI).

A reference is stored with each model version (plain JSON via ``to_dict``/``from_dict``):

* numeric features: interior bin edges at the deciles (``n_bins`` quantiles, taken as
  observed values: numpy's "lower" quantile) of the training values, duplicates removed
  (so heavily tied features get fewer bins); bins are ``(-inf, e_1], (e_1, e_2], ...,
  (e_k, +inf)``, closed on the right;
* categorical features: the share of each level; values not seen at reference time fall in
  an extra ``"(unseen)"`` bin whose reference share is 0.

PSI of new values against a reference, over bins b with reference share r_b and new share a_b::

    PSI = sum_b (a_b - r_b) * ln(a_b / r_b)

with both shares floored at ``epsilon`` (default 1e-4) so an empty bin contributes a large
but finite amount instead of infinity (the floor is a documented convention, not a
published constant). Thresholds 0.10 and 0.25 (below: stable; between: moderate shift;
above: major shift) are common practice.
"""

from __future__ import annotations

import itertools
from dataclasses import dataclass
from typing import Any, cast

import numpy as np
from numpy.typing import ArrayLike

from service.errors import DataError, SpecError
from service.stats._outcome_arrays import FloatArray
from service.stats.columns import CodedLabels

__all__ = [
    "CategoricalReference",
    "NumericReference",
    "PsiBin",
    "PsiResult",
    "Reference",
    "categorical_reference",
    "numeric_reference",
    "psi",
    "psi_from_shares",
    "reference_from_dict",
]

UNSEEN = "(unseen)"
PSI_MODERATE, PSI_MAJOR = 0.10, 0.25


@dataclass(frozen=True)
class NumericReference:
    """Quantile bins of a numeric feature: interior ``edges`` (k,) and ``shares`` (k+1,)."""

    edges: tuple[float, ...]
    shares: tuple[float, ...]
    n_obs: int

    def to_dict(self) -> dict[str, Any]:
        return {
            "kind": "numeric",
            "edges": list(self.edges),
            "shares": list(self.shares),
            "n_obs": self.n_obs,
        }

    def assign(self, values: FloatArray) -> np.ndarray:
        """Bin index (n,) of each value: i such that edges[i-1] < v <= edges[i]."""
        return np.searchsorted(np.asarray(self.edges), values, side="left")

    def labels(self) -> list[tuple[str, float | None, float | None]]:
        bounds = [None, *self.edges, None]
        return [
            (f"({lo if lo is not None else '-inf'}, {hi if hi is not None else 'inf'}]", lo, hi)
            for lo, hi in itertools.pairwise(bounds)
        ]


@dataclass(frozen=True)
class CategoricalReference:
    """Shares of the levels of a categorical feature (in ``levels`` order)."""

    levels: tuple[str, ...]
    shares: tuple[float, ...]
    n_obs: int

    def to_dict(self) -> dict[str, Any]:
        return {
            "kind": "categorical",
            "levels": list(self.levels),
            "shares": list(self.shares),
            "n_obs": self.n_obs,
        }


Reference = NumericReference | CategoricalReference


@dataclass(frozen=True)
class PsiBin:
    """One bin's contribution ``(a - r) ln(a / r)`` with floored shares."""

    label: str
    lower: float | None
    upper: float | None
    reference_share: float
    actual_share: float
    actual_count: int
    contribution: float


@dataclass(frozen=True)
class PsiResult:
    """PSI of new values against a reference, with the per-bin table and counts."""

    psi: float
    band: str  # "stable" | "moderate shift" | "major shift"
    thresholds: tuple[float, float]
    epsilon: float
    bins: tuple[PsiBin, ...]
    n_obs: int
    n_reference: int
    method: str


def _finite(values: ArrayLike, field: str) -> FloatArray:
    arr = np.asarray(values, dtype=np.float64).ravel()
    bad = ~np.isfinite(arr)
    if bad.any():
        i = int(np.flatnonzero(bad)[0])
        raise DataError(
            "numeric feature values must be finite",
            field=f"{field}[{i}]",
            value=float(arr[i]),
            remedy="drop or impute missing values first",
        )
    if arr.size == 0:
        raise DataError("no values given", field=field, value=0, remedy="pass at least one value")
    return arr


def numeric_reference(
    values: ArrayLike, *, n_bins: int = 10, field: str = "values"
) -> NumericReference:
    """Reference for a numeric feature: deduplicated quantile edges and the share per bin."""
    if n_bins < 2:
        raise SpecError(
            "n_bins must be at least 2",
            field="n_bins",
            value=n_bins,
            remedy="use e.g. 10 (deciles)",
        )
    x = _finite(values, field)
    edges = np.unique(np.quantile(x, np.arange(1, n_bins) / n_bins, method="lower"))
    edges = edges[edges < x.max()]  # an edge at the maximum would leave its upper bin empty
    ref = NumericReference(tuple(float(e) for e in edges), (), int(x.size))
    counts = np.bincount(ref.assign(x), minlength=edges.size + 1)
    return NumericReference(ref.edges, tuple(float(c) for c in counts / x.size), int(x.size))


def categorical_reference(values: ArrayLike | list[Any] | CodedLabels) -> CategoricalReference:
    """Reference for a categorical feature: share of each distinct level (sorted by name)."""
    flat = isinstance(values, list) or (isinstance(values, np.ndarray) and values.ndim == 1)
    if isinstance(values, CodedLabels) or (flat and set(map(type, values)) == {str}):  # type: ignore[arg-type]
        coded = (
            values
            if isinstance(values, CodedLabels)
            else CodedLabels.from_strings(cast("list[str]", values))
        )
        if len(coded) == 0:
            raise DataError("no values given", field="values", value=0, remedy="pass values")
        order = sorted(range(len(coded.levels)), key=coded.levels.__getitem__)
        counts = coded.counts()[order]
        return CategoricalReference(
            tuple(coded.levels[j] for j in order),
            tuple(float(c) for c in counts / len(coded)),
            len(coded),
        )
    arr = np.asarray([str(v) for v in np.asarray(values, dtype=object).ravel()], dtype=object)
    if arr.size == 0:
        raise DataError("no values given", field="values", value=0, remedy="pass values")
    levels, counts = np.unique(arr.astype(str), return_counts=True)
    return CategoricalReference(
        tuple(str(v) for v in levels), tuple(float(c) for c in counts / arr.size), int(arr.size)
    )


def reference_from_dict(d: dict[str, Any]) -> Reference:
    """Inverse of ``to_dict`` for either kind of reference."""
    kind = d.get("kind")
    if kind == "numeric":
        return NumericReference(
            tuple(map(float, d["edges"])), tuple(map(float, d["shares"])), int(d["n_obs"])
        )
    if kind == "categorical":
        return CategoricalReference(
            tuple(map(str, d["levels"])), tuple(map(float, d["shares"])), int(d["n_obs"])
        )
    raise SpecError(
        "unknown reference kind", field="kind", value=kind, remedy="use 'numeric' or 'categorical'"
    )


def _band(value: float) -> str:
    if value < PSI_MODERATE:
        return "stable"
    return "moderate shift" if value < PSI_MAJOR else "major shift"


def psi_from_shares(reference: ArrayLike, actual: ArrayLike, *, epsilon: float = 1e-4) -> float:
    """PSI between two share vectors of equal length (see module docstring)."""
    r = np.maximum(np.asarray(reference, dtype=np.float64), epsilon)
    a = np.maximum(np.asarray(actual, dtype=np.float64), epsilon)
    if r.shape != a.shape:
        raise DataError(
            "share vectors differ in length",
            field="actual",
            value=f"{a.shape} vs {r.shape}",
            remedy="use the reference's bins",
        )
    return float(((a - r) * np.log(a / r)).sum())


def psi(
    reference: Reference, values: ArrayLike, *, epsilon: float = 1e-4, field: str = "values"
) -> PsiResult:
    """PSI of ``values`` (n,) against ``reference``, with a per-bin table."""
    labels: list[tuple[str, float | None, float | None]]
    if isinstance(reference, NumericReference):
        x = _finite(values, field)
        counts = np.bincount(reference.assign(x), minlength=len(reference.shares))
        labels = reference.labels()
        ref_shares = np.asarray(reference.shares)
    else:
        arr = np.asarray([str(v) for v in np.asarray(values, dtype=object).ravel()])
        if arr.size == 0:
            raise DataError("no values given", field=field, value=0, remedy="pass values")
        lv = np.asarray(reference.levels)
        order = np.argsort(lv)
        pos = np.searchsorted(lv[order], arr)
        pos_c = np.minimum(pos, lv.size - 1)
        known = lv[order][pos_c] == arr
        idx = np.where(known, order[pos_c], lv.size)
        counts = np.bincount(idx, minlength=lv.size + 1)
        names = [*(str(v) for v in reference.levels), UNSEEN]
        labels = [(name, None, None) for name in names]
        ref_shares = np.r_[np.asarray(reference.shares), 0.0]
        if counts[-1] == 0:  # no unseen values: leave the extra bin out of the table
            counts, labels, ref_shares = counts[:-1], labels[:-1], ref_shares[:-1]
    n = int(counts.sum())
    act = counts / n
    r, a = np.maximum(ref_shares, epsilon), np.maximum(act, epsilon)
    contrib = (a - r) * np.log(a / r)
    bins = tuple(
        PsiBin(lab, lo, hi, float(rs), float(s), int(c), float(ct))
        for (lab, lo, hi), rs, s, c, ct in zip(
            labels, ref_shares, act, counts, contrib, strict=True
        )
    )
    value = float(contrib.sum())
    return PsiResult(
        value,
        _band(value),
        (PSI_MODERATE, PSI_MAJOR),
        epsilon,
        bins,
        n,
        reference.n_obs,
        "population stability index sum (a - r) ln(a / r), shares floored at "
        f"epsilon={epsilon:g}; reference bins from the version's training data",
    )
