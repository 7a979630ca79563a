"""Block sources over files: every call re-reads the data, one batch at a time.

``file_blocks(path, encoding, outcome, ...)`` is a :data:`~service.stats.blocks.BlockSource`:
each call (one Newton pass) scans the Parquet dataset or CSV file again through
:func:`service.sources.tables.chunks` and yields ``Block(X, y, weights, offset)`` with ``X``
the encoding's design matrix of one batch (:func:`service.stats.design.design_matrix`, the
same function the in-memory fit and scoring use). Peak memory is one batch of raw columns
plus its (batch_rows, p) design matrix.
"""

from __future__ import annotations

from collections.abc import Iterator

from service.stats.blocks import Block, BlockSource
from service.stats.design import Encoding, design_matrix

from .paths import DataFiles
from .tables import BATCH_ROWS, TableSpec, chunks

__all__ = ["csv_blocks", "file_blocks", "parquet_blocks", "table_spec"]


def table_spec(
    path: str,
    encoding: Encoding,
    outcome: str,
    weights: str | None = None,
    offset: str | None = None,
    checked: DataFiles | None = None,
) -> TableSpec:
    """The columns a fit of ``encoding`` reads from ``path`` (``checked``: its files)."""
    kinds = {f.name: f.kind for f in encoding.features}
    return TableSpec(str(path), kinds, outcome, weights, offset, checked)


def file_blocks(
    path: str,
    encoding: Encoding,
    outcome: str,
    weights: str | None = None,
    offset: str | None = None,
    batch_rows: int = BATCH_ROWS,
    checked: DataFiles | None = None,
) -> BlockSource:
    """Block source over a Parquet file or directory, or a CSV file (chosen by suffix).

    ``checked``: the files of ``path`` as :func:`service.sources.paths.data_files` checked
    them; without it, ``path``'s own directory is the one allowed directory.
    """
    spec = table_spec(path, encoding, outcome, weights, offset, checked)

    def source() -> Iterator[Block]:
        for c in chunks(spec, batch_rows):
            X = design_matrix(encoding, c.columns, field_prefix=f"data.path[{c.start}+]").X
            yield Block(X, c.y, c.weights, c.offset)

    return source


parquet_blocks = file_blocks
csv_blocks = file_blocks
