"""Files shared by the streaming tests: 200,000 rows in row groups of 10,000, read in blocks
of 4,096 rows (the data are ~50 times a block), as one file, a directory and a CSV."""

from __future__ import annotations

from pathlib import Path

import pyarrow as pa
import pytest

from tests.scale._data import segments, write_csv, write_parquet, write_parts

N_ROWS = 200_000
ROW_GROUP_ROWS = 10_000
BLOCK_ROWS = 4_096


@pytest.fixture(scope="session")
def table() -> pa.Table:
    return segments(2024, N_ROWS)


@pytest.fixture(scope="session")
def files(tmp_path_factory: pytest.TempPathFactory, table: pa.Table) -> dict[str, Path]:
    d = tmp_path_factory.mktemp("scale")
    small = table.slice(0, 30_000)
    return {
        "parquet": write_parquet(table, d / "segments.parquet", ROW_GROUP_ROWS),
        "directory": write_parts(table, d / "parts", 5, ROW_GROUP_ROWS),
        "csv": write_csv(small, d / "segments.csv"),
        "small": write_parquet(small, d / "small.parquet", 3_000),
    }
