"""Helpers of the score-log path tests: a model with two versions, rows, a row count."""

from __future__ import annotations

from datetime import UTC, datetime
from typing import Any

import pytest
from sqlalchemy import func, select

from models_store.models import require_model
from models_store.orm import Score
from service.score_rows import ScoreRows
from service.scoring import new_score_ids
from tests.api._data import fit_body, segments
from tests.api.conftest import ApiClient

FIT = "/risk-models/water-mains/versions"


def score_rows(model: Any, number: int, n: int = 1, *, claims: bool = True) -> ScoreRows:
    """``n`` keyless rows scored with version ``number`` (``claims``: as the champion)."""
    return ScoreRows(
        model, number, new_score_ids(n), None, ['{"a": 1}'] * n, [0.1] * n, [0.2] * n,
        [0.5] * n, datetime.now(UTC), claims,
    )  # fmt: skip


def two_versions_on_sqlite(api: ApiClient) -> Any:
    """Fit "water-mains" twice (champion: version 1) and return the model; SQLite only."""
    if api.app.state.engine.dialect.name != "sqlite":
        pytest.skip("the score log's one-statement path and process serve SQLite files only")
    for seed in (1, 2):
        assert api.post(FIT, json=fit_body(segments(500, seed=seed))).status_code == 201
    with api.app.state.session_factory() as s:
        return require_model(session=s, name="water-mains")


def score_count(api: ApiClient) -> int:
    with api.app.state.engine.connect() as conn:
        return int(conn.execute(select(func.count()).select_from(Score)).scalar_one())
