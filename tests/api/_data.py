"""Seeded, invented pipe-segment data for the API tests (not the demo's generator)."""

from __future__ import annotations

from typing import Any

import numpy as np

MATERIALS = ("PVC", "cast iron", "ductile iron", "asbestos cement")
SOILS = ("low", "moderate", "high")

SPEC: dict[str, Any] = {
    "features": [
        {"name": "age_years", "kind": "numeric"},
        {"name": "diameter_mm", "kind": "numeric", "transform": "log"},
        {"name": "material", "kind": "categorical", "reference": "PVC"},
        {"name": "soil", "kind": "categorical", "reference": "low"},
        {"name": "prior_breaks_5y", "kind": "numeric"},
    ],
    "outcome": "outcome",
}


def segments(n: int = 1500, seed: int = 7) -> dict[str, list[Any]]:
    """Columns of ``n`` segments drawn from a fixed logistic model (invented coefficients)."""
    rng = np.random.default_rng(seed)
    age = rng.uniform(2, 110, n).round(1)
    diameter = rng.choice([100, 150, 200, 300, 450], n)
    material = rng.choice(MATERIALS, n, p=[0.35, 0.3, 0.25, 0.1])
    soil = rng.choice(SOILS, n, p=[0.5, 0.3, 0.2])
    prior = rng.poisson(0.3 + age / 120, n)
    m_eff = {"PVC": 0.0, "cast iron": 0.9, "ductile iron": 0.4, "asbestos cement": 0.5}
    s_eff = {"low": 0.0, "moderate": 0.35, "high": 0.8}
    eta = (
        -3.4
        + 0.02 * (age - 50)
        - 0.5 * np.log(diameter / 150)
        + np.array([m_eff[m] for m in material])
        + np.array([s_eff[s] for s in soil])
        + 0.4 * prior
    )
    y = (rng.uniform(size=n) < 1 / (1 + np.exp(-eta))).astype(int)
    return {
        "age_years": age.tolist(),
        "diameter_mm": diameter.tolist(),
        "material": material.tolist(),
        "soil": soil.tolist(),
        "prior_breaks_5y": prior.tolist(),
        "outcome": y.tolist(),
    }


def rows_of(columns: dict[str, list[Any]]) -> list[dict[str, Any]]:
    names = list(columns)
    return [dict(zip(names, vals, strict=True)) for vals in zip(*columns.values(), strict=True)]


def fit_body(columns: dict[str, list[Any]] | None = None, **extra: Any) -> dict[str, Any]:
    return {**SPEC, **extra, "data": {"columns": columns if columns is not None else segments()}}


NEW_RECORDS: list[dict[str, Any]] = [
    {
        "age_years": 85,
        "diameter_mm": 150,
        "material": "cast iron",
        "soil": "high",
        "prior_breaks_5y": 2,
    },
    {"age_years": 12, "diameter_mm": 200, "material": "PVC", "soil": "low", "prior_breaks_5y": 0},
    {
        "age_years": 55,
        "diameter_mm": 100,
        "material": "ductile iron",
        "soil": "moderate",
        "prior_breaks_5y": 1,
    },
    {
        "age_years": 40,
        "diameter_mm": 450,
        "material": "asbestos cement",
        "soil": "high",
        "prior_breaks_5y": 0,
    },
]
