"""JSON payloads of the demo: training columns, score records keyed by segment and year, and
the outcomes that later join those scores by the same key."""

from __future__ import annotations

from collections.abc import Iterator, Mapping, Sequence
from typing import Any

import numpy as np

from service.demo.scenario import FEATURES

__all__ = ["columns", "outcome_batches", "record_batches", "score_keys"]

Batch = list[dict[str, Any]]


def columns(segments: Mapping[str, np.ndarray], names: Sequence[str]) -> dict[str, list[Any]]:
    """``{name: [python scalars]}`` for the named columns (JSON-ready)."""
    return {name: segments[name].tolist() for name in names}


def score_keys(segments: Mapping[str, np.ndarray], year: int = 2) -> list[str]:
    """The client key of each segment's score in ``year``: ``WM-000001/year-2``."""
    return [f"{sid}/year-{year}" for sid in segments["segment_id"].tolist()]


def record_batches(segments: Mapping[str, np.ndarray], *, batch: int) -> Iterator[Batch]:
    """Score records (``key`` plus the features) in lists of at most ``batch``."""
    values = columns(segments, FEATURES)
    keys = score_keys(segments)
    for start in range(0, len(keys), batch):
        yield [
            {"key": key, **{name: values[name][start + i] for name in FEATURES}}
            for i, key in enumerate(keys[start : start + batch])
        ]


def outcome_batches(segments: Mapping[str, np.ndarray], *, batch: int) -> Iterator[Batch]:
    """Outcomes by key (``{"key", "outcome"}``) in lists of at most ``batch``."""
    keys, outcome = score_keys(segments), segments["outcome"].tolist()
    for start in range(0, len(keys), batch):
        yield [
            {"key": key, "outcome": outcome[start + i]}
            for i, key in enumerate(keys[start : start + batch])
        ]
