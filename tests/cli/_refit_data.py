"""Seeded scenarios with known truth for the refit tests (invented data, own generator).

Records have three numeric features and a three-level grade; the truth is a logistic model
``eta = intercept + b1 x1 + b2 x2 + b3 x3 + grade effect``. Version 1 is fitted on data from
``OLD`` and new records, scored by version 1, get outcomes drawn from a scenario's truth:

* ``same``: OLD again (no change -> the champion is kept);
* ``shift``: OLD + 0.8 on the logit (a pure intercept shift -> intercept update);
* ``slope``: 0.55 * OLD - 0.2 (predictions too extreme, as from an over-fitted model ->
  recalibration);
* ``effect``: OLD with x3's effect switched on (a new effect -> full refit).
"""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

import numpy as np

SPEC: dict[str, Any] = {
    "features": [
        {"name": "x1", "kind": "numeric"},
        {"name": "x2", "kind": "numeric"},
        {"name": "x3", "kind": "numeric"},
        {"name": "grade", "kind": "categorical", "reference": "a"},
    ],
    "outcome": "outcome",
}
GRADES = ("a", "b", "c")
OLD = {"intercept": -1.2, "x1": 0.9, "x2": -0.7, "x3": 0.0, "grade=b": 0.4, "grade=c": 0.8}


def _truth(name: str) -> dict[str, float]:
    t = dict(OLD)
    if name == "shift":
        t["intercept"] += 0.8
    elif name == "slope":
        t = {k: 0.55 * v for k, v in t.items()}
        t["intercept"] -= 0.2
    elif name == "effect":
        t["x3"] = 0.9
    elif name != "same":
        raise ValueError(name)
    return t


def features(n: int, rng: np.random.Generator) -> dict[str, list[Any]]:
    return {
        "x1": rng.normal(size=n).round(4).tolist(),
        "x2": rng.normal(size=n).round(4).tolist(),
        "x3": rng.normal(size=n).round(4).tolist(),
        "grade": rng.choice(GRADES, n, p=[0.5, 0.3, 0.2]).tolist(),
    }


def design(cols: dict[str, list[Any]]) -> np.ndarray:
    """The (n, 6) design in version 1's term order (intercept, x1, x2, x3, grade=b, grade=c)."""
    g = np.asarray(cols["grade"])
    return np.column_stack(
        [np.ones(g.size), cols["x1"], cols["x2"], cols["x3"], g == "b", g == "c"]
    ).astype(float)


def outcomes(cols: dict[str, list[Any]], truth: str, rng: np.random.Generator) -> list[int]:
    t = _truth(truth)
    beta = np.array([t[k] for k in ("intercept", "x1", "x2", "x3", "grade=b", "grade=c")])
    p = 1.0 / (1.0 + np.exp(-(design(cols) @ beta)))
    return (rng.uniform(size=p.size) < p).astype(int).tolist()


def training_columns(n: int, seed: int) -> dict[str, list[Any]]:
    rng = np.random.default_rng([seed, 1])
    cols = features(n, rng)
    cols["outcome"] = outcomes(cols, "same", rng)
    return cols


Post = Callable[..., Any]


def scored_records(n: int, truth: str, seed: int) -> tuple[list[dict[str, Any]], list[int]]:
    """``n`` records to score (with keys) and their outcomes under ``truth``."""
    rng = np.random.default_rng([seed, 2])
    cols = features(n, rng)
    y = outcomes(cols, truth, rng)
    records = [{"key": f"{truth}-{seed}-{i}", **{k: cols[k][i] for k in cols}} for i in range(n)]
    return records, y
