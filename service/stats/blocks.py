"""Blocks of rows: the unit of work of the fitting engine.

Every Newton iteration is a sum of per-block sufficient statistics, so the
engine never needs the whole design matrix at once. A *block source* is a
callable that, each time it is called, yields every block again (one call per
pass over the data). Arrays in memory, Parquet row groups or cluster
partitions are all block sources.

Shapes: ``X`` (m, p) float64, ``y`` (m,), ``weights`` (m,) or None (all ones),
``offset`` (m,) or None (all zeros).
"""

from __future__ import annotations

from collections.abc import Callable, Iterable, Iterator, Sequence
from typing import NamedTuple

import numpy as np

from service.errors import DataError

__all__ = ["Block", "BlockSource", "array_blocks", "sub_blocks"]


class Block(NamedTuple):
    """Rows ``X`` (m, p), outcomes ``y`` (m,), optional ``weights`` and ``offset`` (m,)."""

    X: np.ndarray
    y: np.ndarray
    weights: np.ndarray | None
    offset: np.ndarray | None


BlockSource = Callable[[], Iterable[Block]]


def _column(name: str, values: object, n: int) -> np.ndarray:
    arr = np.asarray(values, dtype=np.float64)
    if arr.ndim != 1 or arr.shape[0] != n:
        raise DataError(
            f"{name} must be a vector with one entry per row of X",
            field=name,
            value=f"shape {arr.shape}",
            remedy=f"pass a 1-d array of length {n}",
        )
    return arr


def array_blocks(
    X: np.ndarray,
    y: np.ndarray,
    weights: np.ndarray | None = None,
    offset: np.ndarray | None = None,
    block_rows: int = 65536,
) -> BlockSource:
    """Block source over in-memory arrays; blocks are views (no copies when X is C-contiguous).

    Raises :class:`DataError` for shapes that do not fit together.
    """
    X = np.asarray(X, dtype=np.float64)
    if X.ndim != 2:
        raise DataError(
            "X must be a 2-d array (rows x terms)",
            field="X",
            value=f"shape {X.shape}",
            remedy="pass an (n, p) matrix",
        )
    X = np.ascontiguousarray(X)
    n = X.shape[0]
    y_arr = _column("y", y, n)
    w_arr = None if weights is None else _column("weights", weights, n)
    o_arr = None if offset is None else _column("offset", offset, n)
    if block_rows < 1:
        raise DataError(
            "block_rows must be positive",
            field="block_rows",
            value=block_rows,
            remedy="use e.g. 16384",
        )

    def source() -> Iterator[Block]:
        for start in range(0, max(n, 1), block_rows):
            stop = min(start + block_rows, n)
            yield Block(
                X[start:stop],
                y_arr[start:stop],
                None if w_arr is None else w_arr[start:stop],
                None if o_arr is None else o_arr[start:stop],
            )

    return source


def sub_blocks(
    blocks: BlockSource,
    keep: Sequence[int],
    fixed: Sequence[int] = (),
    fixed_values: Sequence[float] = (),
) -> BlockSource:
    """Blocks restricted to columns ``keep``; columns ``fixed`` enter the offset.

    ``offset' = offset + X[:, fixed] @ fixed_values``. Used for sub-model refits
    (likelihood-ratio tests) and for profile likelihoods, where one coefficient is
    held at a value while the others are re-estimated.
    """
    keep_idx = np.asarray(keep, dtype=np.intp)
    fixed_idx = np.asarray(fixed, dtype=np.intp)
    fixed_val = np.asarray(fixed_values, dtype=np.float64)

    def source() -> Iterator[Block]:
        for b in blocks():
            off = b.offset
            if fixed_idx.size:
                extra = b.X[:, fixed_idx] @ fixed_val
                off = extra if off is None else off + extra
            yield Block(np.ascontiguousarray(b.X[:, keep_idx]), b.y, b.weights, off)

    return source
