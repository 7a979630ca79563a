"""The refit's data: scored records with outcomes in a window, encoded like the champion.

    score log (inputs, created_at) ⋈ outcome -> window [since, until) on the score time,
    or its last ``last_n`` -> columns -> design_matrix(champion encoding) -> X, y
    -> time-ordered split: development (older part) | holdout (the most recent part)

The inputs logged with every score are exactly the fields the scoring version read, so X is
rebuilt with the champion's encoding and the old linear predictor is recomputed as
``eta_old = X coef_champion`` (the logged ``eta`` belongs to whichever version made the score,
which need not be the current champion; ``scored_by_versions`` reports the mix).
Records are ordered by score time, ties by score id, so the split is reproducible.
"""

from __future__ import annotations

import math
from collections import Counter
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

import numpy as np
from sqlalchemy import select
from sqlalchemy.orm import Session

from models_store.orm import Outcome, RiskModel, Score
from service.data_io import FieldNamer, TrainingData, coerce_column, columns_from_rows
from service.errors import DataError, InvalidInputError, NotEnoughOutcomesError
from service.fitting import data_fingerprint
from service.scoring import LoadedVersion
from service.stats.design import design_matrix

__all__ = ["OUTCOME_NAME", "Part", "RefitData", "load_refit_data", "require_counts"]

OUTCOME_NAME = "outcome"  # the outcome's name in the data fingerprint of scored records


@dataclass(frozen=True)
class Part:
    """One time-ordered part of the data: rows ``[start, stop)`` of the window."""

    name: str
    start: int
    stop: int
    X: np.ndarray  # (n, p)
    y: np.ndarray  # (n,) float64 0/1
    columns: dict[str, np.ndarray]
    first_scored_at: datetime | None
    last_scored_at: datetime | None

    @property
    def n_obs(self) -> int:
        return self.stop - self.start

    @property
    def n_events(self) -> int:
        return int(self.y.sum())

    def describe(self) -> dict[str, Any]:
        return {
            "n_obs": self.n_obs,
            "n_events": self.n_events,
            "first_scored_at": self.first_scored_at,
            "last_scored_at": self.last_scored_at,
        }


@dataclass(frozen=True)
class RefitData:
    """The whole window and its two parts; ``fingerprint`` covers every row used."""

    development: Part
    holdout: Part
    n_obs: int
    n_events: int
    fingerprint: str
    scored_by_versions: dict[str, int]
    window: dict[str, Any]


def _aware(at: datetime) -> datetime:
    return at if at.tzinfo is not None else at.replace(tzinfo=UTC)


def _rows(
    session: Session,
    model: RiskModel,
    since: datetime | None,
    until: datetime | None,
    last_n: int | None,
) -> list[Any]:
    stmt = (
        select(Score.id, Score.inputs, Score.created_at, Score.version_number, Outcome.outcome)
        .join(Outcome, Outcome.score_id == Score.id)
        .where(Score.model_id == model.id)
    )
    if since is not None:
        stmt = stmt.where(Score.created_at >= since)
    if until is not None:
        stmt = stmt.where(Score.created_at < until)
    if last_n is not None:
        newest = stmt.order_by(Score.created_at.desc(), Score.id.desc()).limit(last_n)
        return list(reversed(session.execute(newest).all()))
    return list(session.execute(stmt.order_by(Score.created_at, Score.id)).all())


def _score_field(name: str) -> FieldNamer:
    """Names the field of feature ``name`` in the i-th logged score, e.g. ``scores[3].age``."""
    return lambda i: f"scores[{i}].{name}"


def _columns(
    inputs: list[dict[str, Any]], ids: list[str], v: LoadedVersion
) -> dict[str, np.ndarray]:
    """Logged inputs as typed columns; a record the champion cannot read is a 422."""
    try:
        raw = columns_from_rows(inputs, list(v.kinds), "scores")
        return {
            name: coerce_column(name, kind, raw[name], _score_field(name))
            for name, kind in v.kinds.items()
        }
    except InvalidInputError as exc:
        raise _unreadable(exc, ids, v) from exc


def _unreadable(exc: InvalidInputError, ids: list[str], v: LoadedVersion) -> DataError:
    index = None
    if exc.field and exc.field.startswith("scores["):
        index = int(exc.field[len("scores[") : exc.field.index("]")])
    score_id = ids[index] if index is not None and index < len(ids) else None
    return DataError(
        f"a scored record in the window cannot be encoded by champion version {v.number}: "
        f"{exc.message}",
        field="since",
        value=score_id,
        remedy="start the window (since) after the champion's spec came into use, or score "
        "new records with the champion first",
        details={"score_id": score_id, "cause": exc.to_dict()},
    )


def _part(
    name: str,
    start: int,
    stop: int,
    X: np.ndarray,
    y: np.ndarray,
    cols: dict[str, np.ndarray],
    times: list[datetime],
) -> Part:
    sub = {k: c[start:stop] for k, c in cols.items()}
    first = times[start] if stop > start else None
    last = times[stop - 1] if stop > start else None
    return Part(name, start, stop, X[start:stop], y[start:stop], sub, first, last)


def load_refit_data(
    *,
    session: Session,
    model: RiskModel,
    champion: LoadedVersion,
    since: datetime | None,
    until: datetime | None,
    last_n: int | None,
    holdout_fraction: float,
) -> RefitData:
    """Read, encode and split the window (see the module docstring)."""
    rows = _rows(session, model, since, until, last_n)
    ids = [str(r[0]) for r in rows]
    times = [_aware(r[2]) for r in rows]
    y = np.asarray([float(r[4]) for r in rows], dtype=np.float64)
    window = {"since": since, "until": until, "last_n": last_n, "on": "score time"}
    n = len(rows)
    if n == 0:
        raise NotEnoughOutcomesError(
            "no scored record in the window has an outcome yet",
            field="since" if since is not None else "window",
            value=since.isoformat() if since is not None else None,
            remedy="widen the window (since, until, last_n) or post outcomes first",
            details={"n_outcomes": 0, "n_events": 0, "window": _jsonable(window)},
        )
    cols = _columns([r[1] for r in rows], ids, champion)
    X = design_matrix(champion.encoding, cols, field_prefix="scores").X
    fingerprint = data_fingerprint(TrainingData(cols, y, None, None, n), OUTCOME_NAME, None, None)
    n_hold = min(max(math.ceil(holdout_fraction * n), 1), n - 1) if n > 1 else 0
    cut = n - n_hold
    return RefitData(
        development=_part("development", 0, cut, X, y, cols, times),
        holdout=_part("holdout", cut, n, X, y, cols, times),
        n_obs=n,
        n_events=int(y.sum()),
        fingerprint=fingerprint,
        scored_by_versions={str(k): c for k, c in sorted(Counter(r[3] for r in rows).items())},
        window=window,
    )


def _jsonable(d: dict[str, Any]) -> dict[str, Any]:
    return {k: v.isoformat() if isinstance(v, datetime) else v for k, v in d.items()}


def require_counts(data: RefitData, *, min_outcomes: int, min_events: int) -> None:
    """Both parts need ``min_outcomes`` records and ``min_events`` events and non-events."""
    short = []
    for part in (data.development, data.holdout):
        non_events = part.n_obs - part.n_events
        if part.n_obs < min_outcomes or min(part.n_events, non_events) < min_events:
            short.append(part)
    if not short:
        return
    counts = {
        p.name: {"n_obs": p.n_obs, "n_events": p.n_events, "n_non_events": p.n_obs - p.n_events}
        for p in (data.development, data.holdout)
    }
    said = "; ".join(
        f"{p.name} part has {p.n_obs} outcomes ({p.n_events} events, "
        f"{p.n_obs - p.n_events} non-events)"
        for p in short
    )
    raise NotEnoughOutcomesError(
        f"not enough outcomes to refit: the window has {data.n_obs} outcomes "
        f"({data.n_events} events); {said}; each part needs at least {min_outcomes} outcomes "
        f"and {min_events} events and {min_events} non-events",
        field="window",
        value=data.n_obs,
        remedy="widen the window (since, until, last_n), wait for more outcomes, or lower "
        "gates.min_outcomes / gates.min_events",
        details={
            "n_outcomes": data.n_obs,
            "n_events": data.n_events,
            **counts,
            "required": {"n_obs": min_outcomes, "n_events": min_events},
            "window": _jsonable(data.window),
        },
    )
