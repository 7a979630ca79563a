"""Exact order statistics (and numpy-identical quantiles) of a column streamed in chunks.

Quantile knots and reference-distribution edges must equal the in-memory ``np.quantile`` to
the last bit, so approximate sketches will not do. This is a multi-pass radix selection on
the order-preserving integer image of float64 (Munro & Paterson 1980, *Theoretical Computer
Science* 12:315-323: selection in p passes needs memory of order n^(1/p); quoted from memory):

* every float64 ``v`` maps to a uint64 key with ``v < w  <=>  key(v) < key(w)`` (flip all bits
  of negatives, set the sign bit of non-negatives; ``-0.0`` is normalised to ``0.0`` first);
* pass 1 counts keys by their top 16 bits (a histogram of 65,536 cells per column);
* for each wanted rank the cell that holds it is either *collected* in the next pass (when it
  holds at most ``collect_cap`` values: those values are sorted and the rank read off), or
  histogrammed again by its next 16 bits; after at most 4 refinements a cell is one key.

Memory is ``O(65536 + collect_cap)`` per distinct wanted cell, whatever the number of rows;
with the default cap of 2^18 values, two passes suffice up to roughly 2^18 rows per cell.

Quantiles use numpy's definitions: ``linear`` (virtual index ``(n - 1) q``, interpolation
between the two neighbouring order statistics with numpy's own ``_lerp``, obtained by calling
``np.quantile`` on those two values) and ``lower`` (``floor((n - 1) q)``).
"""

from __future__ import annotations

from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field

import numpy as np

__all__ = ["OrderStatistics", "float_keys", "quantile_ranks", "quantiles_from"]

TOP_BITS = 16
COLLECT_CAP = 1 << 18
_SIGN = np.uint64(1 << 63)


def float_keys(x: np.ndarray) -> np.ndarray:
    """Order-preserving uint64 image of float64 values (n,) -> (n,)."""
    bits = (np.asarray(x, dtype=np.float64) + 0.0).view(np.uint64)
    return np.where(bits & _SIGN, ~bits, bits | _SIGN)


def _from_key(key: int) -> float:
    k = np.uint64(key)
    bits = k & ~_SIGN if k & _SIGN else ~k
    return float(np.array([bits], dtype=np.uint64).view(np.float64)[0])


def quantile_ranks(n: int, quantiles: Sequence[float] | np.ndarray, method: str) -> list[int]:
    """The 0-based ranks ``np.quantile`` reads for ``n`` values (``linear`` or ``lower``)."""
    virtual = (n - 1) * np.asarray(quantiles, dtype=np.float64)
    lo = np.floor(virtual).astype(np.intp)
    if method == "lower":
        return sorted({int(v) for v in lo})
    hi = np.minimum(lo + 1, n - 1)
    return sorted({int(v) for v in lo} | {int(v) for v in hi})


@dataclass
class _Cell:
    """Keys with ``key >> shift == prefix``; ``below`` values have smaller keys."""

    prefix: int
    shift: int
    below: int
    count: int
    ranks: list[int]
    collect: bool
    hist: np.ndarray | None = None
    values: list[np.ndarray] = field(default_factory=list)


class OrderStatistics:
    """Values at chosen ranks of one column; feed every chunk of each pass to :meth:`add`.

    Usage: ``s = OrderStatistics()``; pass 1: ``s.add(chunk)`` for all chunks, then
    ``s.want(ranks)``; while ``not s.done``: ``s.add(chunk)`` for all chunks, ``s.next_pass()``.
    Then ``s.value(rank)``.
    """

    def __init__(self, collect_cap: int = COLLECT_CAP) -> None:
        self.collect_cap = collect_cap
        self.n = 0
        self._top = np.zeros(1 << TOP_BITS, dtype=np.int64)
        self._cells: list[_Cell] = []
        self._values: dict[int, float] = {}
        self._first = True

    @property
    def done(self) -> bool:
        return not self._first and not self._cells

    def add(self, x: np.ndarray) -> None:
        keys = float_keys(x)
        if self._first:
            self.n += keys.size
            self._top += np.bincount(
                (keys >> np.uint64(64 - TOP_BITS)).astype(np.intp), minlength=self._top.size
            )
            return
        for c in self._cells:
            inside = keys[(keys >> np.uint64(c.shift)) == np.uint64(c.prefix)]
            if c.collect:
                c.values.append(inside)
            else:
                sub = (inside >> np.uint64(c.shift - TOP_BITS)) & np.uint64((1 << TOP_BITS) - 1)
                assert c.hist is not None
                c.hist += np.bincount(sub.astype(np.intp), minlength=1 << TOP_BITS)

    def want(self, ranks: Iterable[int]) -> None:
        """End pass 1: the ranks (0-based) whose values are needed."""
        self._first = False
        self._cells = self._split(self._top, 0, 64, 0, sorted(set(ranks)))

    def _split(
        self, hist: np.ndarray, prefix: int, shift: int, below: int, ranks: list[int]
    ) -> list[_Cell]:
        """Cells of the next pass for ``ranks`` inside the histogrammed cell ``prefix``."""
        cum = below + np.cumsum(hist)
        out: dict[int, _Cell] = {}
        sub_shift = shift - TOP_BITS
        for r in ranks:
            b = int(np.searchsorted(cum, r, side="right"))
            lo = int(cum[b - 1]) if b else below
            sub_prefix = (prefix << TOP_BITS) | b
            if sub_shift == 0:  # a single key: its value is known
                self._values[r] = _from_key(sub_prefix)
                continue
            cell = out.get(b)
            if cell is None:
                count = int(hist[b])
                collect = count <= self.collect_cap
                cell = _Cell(sub_prefix, sub_shift, lo, count, [], collect)
                if not collect:
                    cell.hist = np.zeros(1 << TOP_BITS, dtype=np.int64)
                out[b] = cell
            cell.ranks.append(r)
        return list(out.values())

    def next_pass(self) -> None:
        """End a refinement pass: read collected ranks, split the still-large cells."""
        nxt: list[_Cell] = []
        for c in self._cells:
            if c.collect:
                keys = np.sort(np.concatenate(c.values)) if c.values else np.zeros(0, np.uint64)
                for r in c.ranks:
                    self._values[r] = _from_key(int(keys[r - c.below]))
            else:
                assert c.hist is not None
                nxt += self._split(c.hist, c.prefix, c.shift, c.below, c.ranks)
        self._cells = nxt

    def value(self, rank: int) -> float:
        return self._values[rank]


def quantiles_from(
    stats: OrderStatistics, quantiles: Sequence[float] | np.ndarray, method: str
) -> np.ndarray:
    """``np.quantile(x, quantiles, method=method)`` from the order statistics of ``x``."""
    n = stats.n
    q = np.asarray(quantiles, dtype=np.float64)
    virtual = (n - 1) * q
    lo = np.floor(virtual).astype(np.intp)
    if method == "lower":
        return np.array([stats.value(int(k)) for k in lo])
    out = np.empty(q.size)
    for i, (k, v) in enumerate(zip(lo, virtual, strict=True)):
        a = stats.value(int(k))
        b = stats.value(min(int(k) + 1, n - 1))
        # numpy interpolates with gamma = virtual - floor(virtual); on the two values [a, b]
        # its own virtual index is 1 * gamma = gamma, so np.quantile reproduces its arithmetic.
        out[i] = np.quantile(np.array([a, b]), float(v - k))
    return out
