"""Seeded data sets shared by the engine tests."""

from __future__ import annotations

import numpy as np
import pytest


def simulate(
    seed: int, n: int, beta: np.ndarray, *, categorical: bool = False
) -> tuple[np.ndarray, np.ndarray]:
    """Intercept column plus normal features (and a 3-level dummy pair); y ~ Bernoulli."""
    rng = np.random.default_rng(seed)
    k = beta.size - 1 - (2 if categorical else 0)
    cols = [np.ones(n), *rng.normal(size=(k, n))]
    if categorical:
        level = rng.integers(0, 3, n)
        cols += [(level == 1).astype(float), (level == 2).astype(float)]
    X = np.column_stack(cols)
    y = (rng.random(n) < 1.0 / (1.0 + np.exp(-X @ beta))).astype(float)
    return X, y


@pytest.fixture
def make_data() -> object:
    """The :func:`simulate` generator, for tests that need their own data."""
    return simulate


@pytest.fixture
def numeric_data() -> tuple[np.ndarray, np.ndarray]:
    return simulate(11, 1500, np.array([-0.8, 0.6, -0.4, 0.25, 0.0]))


@pytest.fixture
def mixed_data() -> tuple[np.ndarray, np.ndarray]:
    return simulate(12, 1200, np.array([-1.2, 0.7, 0.3, 0.9, -0.5]), categorical=True)
