"""A systematic sample of the rows of a block source, taken during its first pass.

The rows kept are those whose index (0-based, over all blocks in order) is a multiple of the
stride. The stride starts at :data:`MIN_STRIDE`; whenever more than :data:`MAX_ROWS` rows are
kept it doubles, and every other kept row goes (those whose index is an odd multiple of the old
stride). The sample is therefore the same however the rows are cut into blocks, it never holds
more than ``MAX_ROWS`` rows plus one block's share, and for ``n`` rows it ends with
``ceil(n / stride)`` rows for the smallest stride ``MIN_STRIDE * 2^j`` that keeps it within
``MAX_ROWS``: every 16th row up to about a million rows, then about 33,000-65,536 rows.

Memory: at most ``MAX_ROWS`` rows of X, y, weights and offset (36 MiB for 64 terms).
"""

from __future__ import annotations

from collections.abc import Iterator
from dataclasses import dataclass

import numpy as np

from .blocks import Block, BlockSource

__all__ = ["MAX_ROWS", "MIN_STRIDE", "RowSample"]

MIN_STRIDE = 16
MAX_ROWS = 65_536


@dataclass
class _Piece:
    first: int  # index of the piece's first row in the whole source
    block: Block  # rows first, first + stride, first + 2 stride, ... (copies)


def _take(b: Block, sl: slice) -> Block:
    def pick(a: np.ndarray | None) -> np.ndarray | None:
        return None if a is None else np.ascontiguousarray(a[sl])

    y = pick(b.y)
    assert y is not None
    return Block(np.ascontiguousarray(b.X[sl]), y, pick(b.weights), pick(b.offset))


class RowSample:
    """Collects every ``stride``-th row of the blocks given to :meth:`add`, in order."""

    def __init__(self, max_rows: int = MAX_ROWS, min_stride: int = MIN_STRIDE) -> None:
        self.max_rows = max_rows
        self.stride = min_stride
        self.rows = 0
        self._pieces: list[_Piece] = []

    def add(self, block: Block, start: int) -> None:
        """Keep the sampled rows of ``block``, whose first row has index ``start``."""
        first = -start % self.stride
        if first < block.X.shape[0]:
            piece = _Piece(start + first, _take(block, slice(first, None, self.stride)))
            self._pieces.append(piece)
            self.rows += piece.block.X.shape[0]
        while self.rows > self.max_rows:
            self._thin()

    def _thin(self) -> None:
        """Double the stride: drop the kept rows whose index is an odd multiple of it."""
        wider = 2 * self.stride
        pieces, rows = [], 0
        for piece in self._pieces:
            skip = 0 if piece.first % wider == 0 else 1
            block = _take(piece.block, slice(skip, None, 2))
            if block.X.shape[0]:
                pieces.append(_Piece(piece.first + skip * self.stride, block))
                rows += block.X.shape[0]
        self._pieces, self.rows, self.stride = pieces, rows, wider

    def source(self) -> BlockSource:
        """The sample as a block source: one block of the rows in order (the pieces joined, so
        that a pass over it makes few numpy calls and can split into two lanes)."""
        if len(self._pieces) > 1:
            parts = [p.block for p in self._pieces]

            def join(field: int, fill: float) -> np.ndarray | None:
                cols = [b[field] for b in parts]
                if all(c is None for c in cols):
                    return None  # a block without weights (offset) has all ones (zeros)
                pairs = zip(parts, cols, strict=True)
                full = [np.full(b.y.size, fill) if c is None else c for b, c in pairs]
                return np.concatenate(full)

            y = np.concatenate([b.y for b in parts])
            X = np.concatenate([b.X for b in parts])
            whole = Block(X, y, join(2, 1.0), join(3, 0.0))
            self._pieces = [_Piece(self._pieces[0].first, whole)]
        blocks = [p.block for p in self._pieces]

        def gen() -> Iterator[Block]:
            return iter(blocks)

        return gen
