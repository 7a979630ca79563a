"""Seeded pipe-segment data written as Parquet (row groups) and CSV, for the streaming tests.

Columns: ``age_years`` (spline), ``diameter_mm`` (numeric, log), ``material`` and ``soil``
(categorical), ``prior_breaks_5y`` (numeric, heavily tied), ``exposure`` (case weight),
``log_length`` (offset) and the 0/1 ``outcome`` drawn from a known logistic model.
"""

from __future__ import annotations

import itertools
from pathlib import Path
from typing import Any

import numpy as np
import pyarrow as pa
import pyarrow.csv as pa_csv
import pyarrow.parquet as pq

MATERIALS = np.array(["PVC", "cast iron", "ductile iron", "asbestos cement"])
SOILS = np.array(["low", "moderate", "high"])

SPEC_FEATURES: list[dict[str, Any]] = [
    {"name": "age_years", "kind": "spline", "knots": 4},
    {"name": "diameter_mm", "kind": "numeric", "transform": "log"},
    {"name": "material", "kind": "categorical", "reference": "PVC"},
    {"name": "soil", "kind": "categorical", "reference": "low"},
    {"name": "prior_breaks_5y", "kind": "numeric"},
]
LOG_SPLINE: dict[str, Any] = {"name": "length_m", "kind": "spline", "transform": "log", "knots": 3}


def segments(seed: int, n: int) -> pa.Table:
    """``n`` seeded segments as a pyarrow table."""
    rng = np.random.default_rng(seed)
    age = np.round(rng.uniform(1, 110, n), 1)
    diam = rng.choice([100.0, 150.0, 200.0, 300.0, 450.0], n)
    mat = rng.choice(MATERIALS, n, p=[0.35, 0.3, 0.25, 0.1])
    soil = rng.choice(SOILS, n, p=[0.5, 0.3, 0.2])
    prior = rng.poisson(0.4, n).astype(float)
    length = np.round(rng.lognormal(4.5, 0.6, n), 2)
    eta = (
        -4.2
        + 0.022 * age
        - 0.35 * np.log(diam / 150.0)
        + np.select([mat == "cast iron", mat == "asbestos cement"], [0.8, 0.4], 0.0)
        + np.select([soil == "high", soil == "moderate"], [0.6, 0.25], 0.0)
        + 0.45 * prior
    )
    offset = np.log(length / 100.0)
    y = (rng.random(n) < 1.0 / (1.0 + np.exp(-(eta + offset)))).astype(np.int8)
    return pa.table(
        {
            "age_years": age,
            "diameter_mm": diam,
            "material": mat,
            "soil": soil,
            "prior_breaks_5y": prior,
            "length_m": length,
            "exposure": np.round(rng.uniform(0.5, 2.0, n), 3),
            "log_length": offset,
            "outcome": y,
        }
    )


def write_parquet(table: pa.Table, path: Path, row_group_rows: int) -> Path:
    pq.write_table(table, path, row_group_size=row_group_rows)
    return path


def write_parts(table: pa.Table, folder: Path, n_parts: int, row_group_rows: int) -> Path:
    """A directory of ``n_parts`` Parquet files (``part-000.parquet`` ...), rows in order."""
    folder.mkdir(parents=True, exist_ok=True)
    bounds = np.linspace(0, table.num_rows, n_parts + 1).astype(int)
    for k, (lo, hi) in enumerate(itertools.pairwise(bounds.tolist())):
        pq.write_table(
            table.slice(lo, hi - lo),
            folder / f"part-{k:03d}.parquet",
            row_group_size=row_group_rows,
        )
    return folder


def write_csv(table: pa.Table, path: Path) -> Path:
    pa_csv.write_csv(table, path)
    return path
