"""Consistency checks read straight from the store after a crash or a load run.

:func:`store_problems` lists everything that would betray a half-written or inconsistent
store (empty list: consistent): the engine's own integrity check
(:func:`models_store.check_integrity`: SQLite ``integrity_check``/``foreign_key_check`` and
the schema at head), then, per stored version, that the coefficient vector, term names,
term table and covariance agree in size (coef length = term count, cov p x p, symmetric,
finite, non-negative diagonal), version numbers per model run 1..k without gaps, and every
champion change names an existing version.
"""

from __future__ import annotations

import math
from collections import Counter
from typing import Any

from sqlalchemy import func, select
from sqlalchemy.engine import Engine

from models_store import check_integrity
from models_store.orm import ChampionChange, ModelVersion, Outcome, Score

__all__ = ["outcome_map", "score_ids", "store_problems", "table_count"]


def _version_problems(row: Any) -> list[str]:
    where = f"model {row.model_id} version {row.number}"
    p = len(row.term_names)
    problems = []
    if p == 0 or len(row.coef) != p:
        problems.append(f"{where}: {len(row.coef)} coefficients for {p} terms")
    terms = (row.term_table or {}).get("terms", [])
    if len(terms) != p:
        problems.append(f"{where}: term table has {len(terms)} rows for {p} terms")
    cov = row.cov
    if len(cov) != p or any(len(r) != p for r in cov):
        problems.append(f"{where}: covariance is not {p} x {p}")
        return problems
    values = [float(v) for r in cov for v in r] + [float(c) for c in row.coef]
    if not all(math.isfinite(v) for v in values):
        problems.append(f"{where}: non-finite coefficient or covariance entry")
    for i in range(p):
        if cov[i][i] < 0:
            problems.append(f"{where}: negative variance for term {i}")
        for j in range(i):
            if abs(cov[i][j] - cov[j][i]) > 1e-9 * (1 + abs(cov[i][j])):
                problems.append(f"{where}: covariance not symmetric at ({i}, {j})")
    if row.n_obs != (row.fit_stats or {}).get("n_obs", row.n_obs):
        problems.append(f"{where}: n_obs {row.n_obs} disagrees with fit statistics")
    return problems


def store_problems(engine: Engine) -> list[str]:
    """Every inconsistency found (see the module docstring); empty when the store is sound."""
    problems = list(check_integrity(engine))
    with engine.connect() as conn:
        versions = conn.execute(select(ModelVersion)).all()
        numbers: dict[int, list[int]] = {}
        for row in versions:
            problems += _version_problems(row)
            numbers.setdefault(row.model_id, []).append(row.number)
        for model_id, got in numbers.items():
            if sorted(got) != list(range(1, len(got) + 1)):
                problems.append(f"model {model_id}: version numbers {sorted(got)} have gaps")
        for change in conn.execute(select(ChampionChange)).all():
            if change.version_number not in numbers.get(change.model_id, []):
                problems.append(
                    f"model {change.model_id}: champion change {change.seq} names missing "
                    f"version {change.version_number}"
                )
    return problems


def table_count(engine: Engine, table: Any) -> int:
    with engine.connect() as conn:
        return int(conn.scalar(select(func.count()).select_from(table)) or 0)


def score_ids(engine: Engine) -> set[str]:
    """Every logged score id."""
    with engine.connect() as conn:
        return set(conn.scalars(select(Score.id)))


def outcome_map(engine: Engine) -> tuple[dict[str, int], Counter[str]]:
    """Stored outcome per score id, and how many outcome rows each score id has."""
    with engine.connect() as conn:
        rows = conn.execute(select(Outcome.score_id, Outcome.outcome)).all()
    return {sid: int(v) for sid, v in rows}, Counter(sid for sid, _ in rows)
