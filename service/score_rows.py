"""What a scoring request hands to the score-log writer, and the champion check at commit.

:class:`ScoreRows` holds one request's rows by column; :func:`check_champion` refuses rows
scored with a version that is no longer the champion (:class:`ChampionChangedError`: the
request scores again); :func:`begin_write` starts a session's transaction as a writer.
"""

from __future__ import annotations

from collections.abc import Callable, Sequence
from dataclasses import dataclass
from datetime import datetime

from sqlalchemy.orm import Session

from models_store.champions import model_with_champion
from models_store.orm import RiskModel
from models_store.score_append import FreshRows
from models_store.scores import ScoreBatch, ScoreParams, add_score_batch, score_rows_params

__all__ = ["ChampionChangedError", "ScoreRows", "begin_write", "check_champion"]

# SQLite: take the write lock at BEGIN (models_store.db's documented execution option), so the
# champion read and the insert see one state of the store; PostgreSQL ignores the option.
_WRITE_TXN = {"riskfit_sqlite_begin": "IMMEDIATE"}


class ChampionChangedError(Exception):
    """The rows were scored with a version that is no longer the champion; nothing written.

    ``number`` is the champion the commit read (None: the model has none). Never reaches a
    client: the scoring route scores again with ``number``.
    """

    def __init__(self, model_id: int, number: int | None) -> None:
        super().__init__(f"the champion of model {model_id} is now {number}")
        self.model_id = model_id
        self.number = number


@dataclass(frozen=True)
class ScoreRows:
    """One request's score-log rows, columnar (see :func:`models_store.scores.add_score_batch`)."""

    model: RiskModel
    version_number: int
    ids: Sequence[str]
    keys: Sequence[str | None] | None
    inputs_json: Sequence[str]
    eta: Sequence[float]
    se_eta: Sequence[float]
    probability: Sequence[float]
    created_at: datetime
    checks_champion: bool = False  # scored with the champion: must still be it at commit

    def columns(self) -> ScoreBatch:
        """The rows by column, as the store's insert functions take them."""
        return ScoreBatch(
            version_number=self.version_number,
            ids=self.ids,
            keys=self.keys,
            inputs_json=self.inputs_json,
            eta=self.eta,
            se_eta=self.se_eta,
            probability=self.probability,
            created_at=self.created_at,
        )

    def params(self, session: Session) -> list[ScoreParams]:
        """The rows as driver parameters (:func:`models_store.scores.score_rows_params`)."""
        dialect = session.get_bind().dialect
        return score_rows_params(dialect=dialect, model_id=self.model.id, **self.columns())

    def insert(self, session: Session) -> None:
        add_score_batch(session=session, model=self.model, **self.columns())

    def fresh(self, created_at: str) -> list[FreshRows]:
        """Keyless rows for :func:`models_store.score_append.append_fresh` (time as bound)."""
        model_id, number, checks = self.model.id, self.version_number, int(self.checks_champion)
        return [
            (i, model_id, number, inputs, eta, se, p, created_at, checks)
            for i, inputs, eta, se, p in zip(
                self.ids, self.inputs_json, self.eta, self.se_eta, self.probability, strict=True
            )
        ]


def check_champion(
    session: Session,
    rows: ScoreRows,
    seen: Callable[[int, int | None], None] | None = None,
    read: dict[int, int | None] | None = None,
) -> None:
    """Raise :class:`ChampionChangedError` unless ``rows`` may be written in this transaction.

    Rows that do not claim the champion pass. ``seen(model id, champion)`` is told what was
    read; ``read`` (model id -> champion) keeps the reads of one transaction.
    """
    if not rows.checks_champion:
        return
    read = {} if read is None else read
    model_id = rows.model.id
    if model_id not in read:
        found = model_with_champion(session=session, name=rows.model.name)
        read[model_id] = None if found is None else found[1]
        if seen is not None:
            seen(model_id, read[model_id])
    if read[model_id] != rows.version_number:
        raise ChampionChangedError(model_id, read[model_id])


def begin_write(session: Session) -> None:
    """Start ``session``'s transaction as a writer (SQLite: ``BEGIN IMMEDIATE``)."""
    session.connection(execution_options=_WRITE_TXN)
