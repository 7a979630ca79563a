"""Learn an encoding, training ranges and drift references from data streamed in chunks.

The result is identical to what the in-memory fit learns from the same rows
(:func:`service.stats.design.learn_encoding` plus the references of
:mod:`service.fitting`): the same levels, the same spline knots (``np.quantile``, linear, on
the transformed scale), the same ranges, and the same reference distributions
(:func:`service.stats.psi.numeric_reference`: ``lower`` quantiles at i / n_bins of the raw
values, edges deduplicated and below the maximum, shares per bin).

Passes over the data:

1. counts, levels (with their counts), minima and maxima, and the top-16-bit histograms of
   the exact selection (:mod:`service.sources.order_stats`);
2. (and rarely 3-5) collect the few values around each wanted rank; read knots and edges;
3. count the rows per reference bin (only if there are numeric features).

Memory is bounded by one chunk plus, per numeric feature, 65,536 counters and at most
``collect_cap`` values per wanted rank; categorical levels are bounded by ``max_levels``.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator, Mapping, Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np

from service.data_io import NUMERIC_KINDS
from service.errors import DataError, LimitExceededError
from service.stats.design import Encoding, FeatureFacts, encoding_from_facts
from service.stats.design_spec import check_spec
from service.stats.psi import CategoricalReference, NumericReference

from .order_stats import OrderStatistics, quantile_ranks, quantiles_from
from .tables import Chunk

__all__ = ["StreamedEncoding", "learn_streamed"]

ChunkSource = Callable[[], Iterator[Chunk]]


@dataclass(frozen=True)
class StreamedEncoding:
    """The encoding and what :mod:`service.fitting` stores beside it, learned in passes."""

    encoding: Encoding
    references: dict[str, Any]  # feature -> NumericReference/CategoricalReference.to_dict()
    ranges: dict[str, Any]  # feature -> {"kind", "min", "max", "n_obs"} or {"levels", ...}
    n_obs: int
    passes: int


@dataclass
class _Numeric:
    name: str
    item: dict[str, Any]
    raw: OrderStatistics = field(default_factory=OrderStatistics)
    scaled: OrderStatistics | None = None  # spline with a log transform: knots on log scale
    minimum: float = np.inf
    maximum: float = -np.inf
    edges: np.ndarray | None = None
    counts: np.ndarray | None = None

    def stats(self) -> list[OrderStatistics]:
        return [self.raw] if self.scaled is None else [self.raw, self.scaled]


def _log(x: np.ndarray, name: str, start: int) -> np.ndarray:
    bad = np.flatnonzero(x <= 0)
    if bad.size:
        i = int(bad[0])
        raise DataError(
            f"feature {name!r} is log-transformed but row {start + i} holds {x[i]:g} (<= 0)",
            field=f"data.path[{start + i}].{name}",
            value=float(x[i]),
            remedy=f"give a positive {name!r}, or drop the log transform from the spec",
        )
    out: np.ndarray = np.log(x)
    return out


def _feed(num: _Numeric, chunk: Chunk) -> None:
    x = chunk.columns[num.name]
    num.raw.add(x)
    if num.scaled is not None:
        num.scaled.add(_log(x, num.name, chunk.start))


def _levels(counts: dict[str, int], values: np.ndarray, name: str, max_levels: int) -> None:
    uniq, c = np.unique(values.astype(str), return_counts=True)
    for lv, k in zip(uniq.tolist(), c.tolist(), strict=True):
        counts[lv] = counts.get(lv, 0) + k
    if len(counts) > max_levels:
        raise LimitExceededError(
            f"feature {name!r} has more than {max_levels} distinct levels",
            field=f"data.columns.{name}",
            value=len(counts),
            remedy="merge rare levels or make the feature numeric "
            "(an operator may raise RISKFIT_MAX_LEVELS)",
            details={"limit": max_levels, "setting": "max_levels"},
        )


def learn_streamed(
    features: Sequence[Mapping[str, Any]],
    source: ChunkSource,
    interactions: Sequence[Sequence[str]] = (),
    *,
    n_bins: int = 10,
    max_levels: int = 1000,
) -> StreamedEncoding:
    """Encoding, references and ranges of the rows ``source()`` yields (see module docstring)."""
    items = check_spec(features)
    nums = [
        _Numeric(
            it["name"],
            it,
            scaled=OrderStatistics()
            if it["kind"] == "spline" and it["transform"] == "log"
            else None,
        )
        for it in items
        if it["kind"] in NUMERIC_KINDS
    ]
    cats: dict[str, dict[str, int]] = {
        it["name"]: {} for it in items if it["kind"] not in NUMERIC_KINDS
    }
    n = 0
    for chunk in source():  # pass 1
        n += chunk.n_obs
        for num in nums:
            x = chunk.columns[num.name]
            num.minimum = min(num.minimum, float(x.min()))
            num.maximum = max(num.maximum, float(x.max()))
            _feed(num, chunk)
        for name, counts in cats.items():
            _levels(counts, chunk.columns[name], name, max_levels)
    if n == 0:
        raise DataError(
            "the data hold no rows",
            field="data.path",
            value=0,
            remedy="point at a file with at least a few hundred rows, both outcomes present",
        )
    passes = 1 + _select(nums, source, n, n_bins)
    if nums:
        _count_bins(nums, source)
        passes += 1
    facts = {name: FeatureFacts(levels=tuple(sorted(c))) for name, c in cats.items()}
    refs: dict[str, Any] = {}
    ranges: dict[str, Any] = {}
    for num in nums:
        knots: tuple[float, ...] = ()
        if num.item["kind"] == "spline":
            q = quantiles_from(num.scaled or num.raw, num.item["knot_quantiles"], "linear")
            knots = tuple(float(v) for v in np.unique(q))
        facts[num.name] = FeatureFacts(minimum=num.minimum, maximum=num.maximum, knots=knots)
        assert num.edges is not None and num.counts is not None
        refs[num.name] = NumericReference(
            tuple(float(e) for e in num.edges), tuple(float(c) for c in num.counts / n), n
        ).to_dict()
        ranges[num.name] = {"kind": num.item["kind"], "min": num.minimum, "max": num.maximum}
        ranges[num.name]["n_obs"] = n
    for it in items:
        if it["name"] in cats:
            counts = cats[it["name"]]
            levels = sorted(counts)
            shares = np.array([counts[lv] for lv in levels]) / n
            refs[it["name"]] = CategoricalReference(
                tuple(levels), tuple(float(s) for s in shares), n
            ).to_dict()
            ranges[it["name"]] = {
                "kind": it["kind"],
                "levels": {lv: counts[lv] for lv in levels},
                "n_obs": n,
            }
    order = [it["name"] for it in items]
    encoding = encoding_from_facts(features, facts, interactions, prefix="data.columns")
    return StreamedEncoding(
        encoding,
        {k: refs[k] for k in order},
        {k: ranges[k] for k in order},
        n,
        passes,
    )


def _select(nums: list[_Numeric], source: ChunkSource, n: int, n_bins: int) -> int:
    """Refinement passes until every wanted order statistic is known; returns their number."""
    deciles = np.arange(1, n_bins) / n_bins
    for num in nums:
        raw_ranks = quantile_ranks(n, deciles, "lower")
        if num.item["kind"] == "spline":
            knot_ranks = quantile_ranks(n, num.item["knot_quantiles"], "linear")
            if num.scaled is not None:
                num.scaled.want(knot_ranks)
            else:
                raw_ranks += knot_ranks
        num.raw.want(raw_ranks)
    passes = 0
    while any(not s.done for num in nums for s in num.stats()):
        for chunk in source():
            for num in nums:
                _feed(num, chunk)
        for num in nums:
            for s in num.stats():
                if not s.done:
                    s.next_pass()
        passes += 1
    for num in nums:
        edges = np.unique(quantiles_from(num.raw, deciles, "lower"))
        num.edges = edges[edges < num.maximum]
    return passes


def _count_bins(nums: list[_Numeric], source: ChunkSource) -> None:
    """Rows per reference bin ``(-inf, e_1], (e_1, e_2], ..., (e_k, inf)`` (one pass)."""
    for num in nums:
        assert num.edges is not None
        num.counts = np.zeros(num.edges.size + 1, dtype=np.int64)
    for chunk in source():
        for num in nums:
            assert num.edges is not None and num.counts is not None
            bins = np.searchsorted(num.edges, chunk.columns[num.name], side="left")
            num.counts += np.bincount(bins, minlength=num.counts.size)
