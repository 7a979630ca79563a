"""Champion: which version serves a model; every change is a new row (history kept)."""

from __future__ import annotations

import functools

from sqlalchemy import select
from sqlalchemy.engine import Dialect
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

from models_store._util import next_number
from models_store.orm import ChampionChange, RiskModel
from models_store.versions import require_version
from service.errors import ConflictError, InvalidInputError

__all__ = ["champion_history", "current_champion", "model_with_champion", "set_champion"]


def _latest_change(session: Session, model: RiskModel) -> ChampionChange | None:
    stmt = (
        select(ChampionChange)
        .where(ChampionChange.model_id == model.id)
        .order_by(ChampionChange.seq.desc())
        .limit(1)
    )
    return session.scalar(stmt)


def current_champion(*, session: Session, model: RiskModel) -> int | None:
    """The number of the version currently serving ``model`` (None before the first)."""
    change = _latest_change(session, model)
    return None if change is None else change.version_number


def model_with_champion(*, session: Session, name: str) -> tuple[RiskModel, int | None] | None:
    """The model called ``name`` and its champion number in one read (None: no such model).

    For the scoring path: one plain SQL statement through the session's connection (no
    statement building, cache-key or ORM work per call); the model comes back as a detached
    :class:`RiskModel` holding ``id``, ``name`` and ``description``.
    """
    conn = session.connection()
    row = conn.exec_driver_sql(_model_with_champion_sql(conn.dialect), (name,)).first()
    if row is None:
        return None
    return RiskModel(id=row[0], name=name, description=row[1]), row[2]


@functools.lru_cache(maxsize=32)
def _model_with_champion_sql(dialect: Dialect) -> str:
    q = dialect.identifier_preparer.quote
    mark = "?" if dialect.paramstyle == "qmark" else "%s"
    model, change = q(RiskModel.__tablename__), q(ChampionChange.__tablename__)
    latest = (
        f"SELECT c.{q('version_number')} FROM {change} c WHERE c.{q('model_id')} = m.{q('id')}"
        f" ORDER BY c.{q('seq')} DESC LIMIT 1"
    )
    return (
        f"SELECT m.{q('id')}, m.{q('description')}, ({latest}) FROM {model} m"
        f" WHERE m.{q('name')} = {mark}"
    )


def set_champion(
    *,
    session: Session,
    model: RiskModel,
    number: int,
    reason: str,
    key_id: int | None = None,
) -> ChampionChange:
    """Make version ``number`` the champion, recording the previous one and the reason.

    Raises :class:`VersionNotFoundError` for a version that does not exist,
    :class:`InvalidInputError` for an empty reason, :class:`ConflictError` when another
    change was recorded at the same moment (PostgreSQL; SQLite serialises writers).
    """
    if not reason or not reason.strip():
        raise InvalidInputError(
            "a champion change needs a reason",
            field="reason",
            value=reason,
            remedy="say why this version should serve (kept in the champion history)",
        )
    require_version(session=session, model=model, number=number)
    previous = _latest_change(session, model)
    change = ChampionChange(
        model_id=model.id,
        seq=next_number(session, ChampionChange.seq, ChampionChange.model_id, model.id),
        version_number=number,
        previous_version_number=None if previous is None else previous.version_number,
        reason=reason.strip(),
        changed_by_key_id=key_id,
    )
    try:
        with session.begin_nested():
            session.add(change)
    except IntegrityError as error:
        raise ConflictError(
            f"the champion of {model.name!r} was changed by another request at the same time",
            field="version",
            value=number,
            remedy="read the champion history and retry if the change is still wanted",
        ) from error
    return change


def champion_history(*, session: Session, model: RiskModel) -> list[ChampionChange]:
    """Every champion change of ``model``, oldest first."""
    stmt = (
        select(ChampionChange)
        .where(ChampionChange.model_id == model.id)
        .order_by(ChampionChange.seq)
    )
    return list(session.scalars(stmt))
