"""The store's tables as typed SQLAlchemy 2.x mappings (one class per table, singular names).

Conventions
-----------
* Every ``*_at`` column is :class:`~models_store._types.UTCDateTime`: stored UTC, read back aware.
* JSON columns use ``sqlalchemy.JSON`` (``json`` on PostgreSQL, text on SQLite); coefficient
  vectors and covariance matrices are small (p <= a few hundred) and stored as JSON lists.
* Constraint names follow :data:`NAMING_CONVENTION`, so migrations can refer to them by name.
* ``model_version`` rows are immutable: :func:`_refuse_version_change` rejects any ORM update or
  delete, and :func:`_refuse_bulk_version_update` rejects ``update(ModelVersion)`` statements run
  through a session. A new fit, recalibration or refit is a new row with the next number.
* Refit exclusivity: ``refit_lock`` holds at most one row per model (its primary key is the
  model id), inserted in its own committed transaction and deleted on release; its holder
  renews ``expires_at`` (a short lease) while it works, so a stale row (``expires_at`` in the
  past: the holder was killed or hung) is removed by the next acquirer, which fails the runs
  left ``running`` (models_store/refits.py). The same INSERT-with-a-unique-key works
  identically on SQLite and PostgreSQL, across processes.
"""

from __future__ import annotations

from datetime import datetime
from typing import Any, ClassVar

from sqlalchemy import (
    JSON,
    BigInteger,
    CheckConstraint,
    Float,
    ForeignKey,
    ForeignKeyConstraint,
    Index,
    Integer,
    LargeBinary,
    MetaData,
    SmallInteger,
    String,
    Text,
    UniqueConstraint,
    event,
    text,
)
from sqlalchemy.orm import (
    DeclarativeBase,
    Mapped,
    Mapper,
    ORMExecuteState,
    Session,
    mapped_column,
)

from models_store._types import UTCDateTime, utcnow

__all__ = [
    "NAMING_CONVENTION",
    "AlertRecord",
    "ApiKey",
    "AuditEvent",
    "Base",
    "ChampionChange",
    "DashboardSession",
    "ImmutableVersionError",
    "ModelVersion",
    "Outcome",
    "RefitLock",
    "RefitRun",
    "RiskModel",
    "Score",
]

NAMING_CONVENTION: dict[str, str] = {
    "ix": "ix_%(table_name)s_%(column_0_N_name)s",
    "uq": "uq_%(table_name)s_%(column_0_N_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_N_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}

NAME_LEN = 200  # model names, key names, score keys
ORIGINS = ("fit", "intercept", "recalibrate", "refit")
ROLES = ("scorer", "modeler", "admin")
REFIT_STATUSES = ("running", "succeeded", "failed")


class Base(DeclarativeBase):
    metadata = MetaData(naming_convention=NAMING_CONVENTION)
    type_annotation_map: ClassVar[dict[Any, Any]] = {
        datetime: UTCDateTime(),
        dict[str, Any]: JSON,
        list[Any]: JSON,
    }


def _in(values: tuple[str, ...]) -> str:
    return ", ".join(f"'{v}'" for v in values)


class RiskModel(Base):
    """A named risk model; its versions, champion history and score log hang off it."""

    __tablename__ = "risk_model"

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    name: Mapped[str] = mapped_column(String(NAME_LEN), unique=True)
    description: Mapped[str] = mapped_column(Text, default="")
    created_at: Mapped[datetime] = mapped_column(default=utcnow)
    # Per-model alert-threshold overrides (service.monitoring.thresholds); {} = the defaults.
    alert_thresholds: Mapped[dict[str, Any]] = mapped_column(JSON, default=dict)


class ApiKey(Base):
    """An API key: only its hash is kept; ``prefix`` lets people recognise it in lists."""

    __tablename__ = "api_key"
    __table_args__ = (CheckConstraint(f"role IN ({_in(ROLES)})", name="role"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    name: Mapped[str] = mapped_column(String(NAME_LEN))
    role: Mapped[str] = mapped_column(String(16))
    key_hash: Mapped[str] = mapped_column(String(128), unique=True)
    prefix: Mapped[str] = mapped_column(String(16))
    created_at: Mapped[datetime] = mapped_column(default=utcnow)
    revoked_at: Mapped[datetime | None]
    last_used_at: Mapped[datetime | None]


class DashboardSession(Base):
    """A dashboard sign-in: the cookie holds a random token, the row only its SHA-256.

    A session is honoured while unexpired, not revoked (sign-out sets ``revoked_at``) and while
    its key is not revoked, so revoking a key ends every session signed in with it. A row is
    the same on SQLite and PostgreSQL and is seen by every server process at once.
    """

    __tablename__ = "dashboard_session"

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    token_hash: Mapped[str] = mapped_column(String(64), unique=True)
    key_id: Mapped[int] = mapped_column(ForeignKey("api_key.id"), index=True)
    created_at: Mapped[datetime] = mapped_column(default=utcnow)
    expires_at: Mapped[datetime]
    revoked_at: Mapped[datetime | None]


class ModelVersion(Base):
    """One fitted version: everything needed to score, explain and audit it. Never updated."""

    __tablename__ = "model_version"
    __table_args__ = (
        UniqueConstraint("model_id", "number"),
        CheckConstraint("number >= 1", name="number_positive"),
        CheckConstraint(f"origin IN ({_in(ORIGINS)})", name="origin"),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    model_id: Mapped[int] = mapped_column(ForeignKey("risk_model.id"))
    number: Mapped[int]
    spec: Mapped[dict[str, Any]]
    encoding: Mapped[dict[str, Any]]
    term_names: Mapped[list[Any]]
    coef: Mapped[list[Any]]
    cov: Mapped[list[Any]]
    fit_stats: Mapped[dict[str, Any]]
    term_table: Mapped[dict[str, Any]]
    method: Mapped[str] = mapped_column(String(16))
    options: Mapped[dict[str, Any]] = mapped_column(default=dict)
    training_ranges: Mapped[dict[str, Any]] = mapped_column(default=dict)
    reference_distributions: Mapped[dict[str, Any]] = mapped_column(default=dict)
    data_fingerprint: Mapped[str] = mapped_column(String(64))
    n_obs: Mapped[int]
    n_events: Mapped[float] = mapped_column(Float)
    parent_number: Mapped[int | None]
    origin: Mapped[str] = mapped_column(String(16), default="fit")
    origin_details: Mapped[dict[str, Any]] = mapped_column(default=dict)
    note: Mapped[str] = mapped_column(Text, default="")
    created_at: Mapped[datetime] = mapped_column(default=utcnow)
    created_by_key_id: Mapped[int | None] = mapped_column(ForeignKey("api_key.id"))


class ChampionChange(Base):
    """Append-only history of which version serves; the newest row (highest seq) is current.

    ``seq`` (1, 2, ... per model, unique) makes two concurrent changes collide instead of both
    claiming the same ``previous_version_number``.
    """

    __tablename__ = "champion_change"
    __table_args__ = (
        UniqueConstraint("model_id", "seq"),
        ForeignKeyConstraint(
            ["model_id", "version_number"], ["model_version.model_id", "model_version.number"]
        ),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    model_id: Mapped[int] = mapped_column(ForeignKey("risk_model.id"))
    seq: Mapped[int]
    version_number: Mapped[int]
    previous_version_number: Mapped[int | None]
    reason: Mapped[str] = mapped_column(Text)
    changed_at: Mapped[datetime] = mapped_column(default=utcnow)
    changed_by_key_id: Mapped[int | None] = mapped_column(ForeignKey("api_key.id"))


class Score(Base):
    """The score log: one row per scored record, written before the response returns.

    Storage is chosen for the insert, the hot path (10,000 rows per big batch):

    * SQLite keeps the rows in the primary-key B-tree itself (``WITHOUT ROWID``): the ids are
      time-ordered UUIDs (service.score_log_rows), so a batch appends at the tree's right edge
      and no separate rowid table plus id index is written. PostgreSQL ignores the option.
    * Keys are unique per model through a *partial* unique index (``key IS NOT NULL``): most
      scores carry no key and then cost no entry in it. Look-ups by key (``key IN (...)``)
      imply ``key IS NOT NULL`` and use it on both backends.
    """

    __tablename__ = "score"
    __table_args__ = (
        Index(
            "uq_score_model_id_key",
            "model_id",
            "key",
            unique=True,
            sqlite_where=text("key IS NOT NULL"),
            postgresql_where=text("key IS NOT NULL"),
        ),
        ForeignKeyConstraint(
            ["model_id", "version_number"], ["model_version.model_id", "model_version.number"]
        ),
        Index(None, "model_id", "created_at"),
        {"sqlite_with_rowid": False},
    )

    id: Mapped[str] = mapped_column(String(36), primary_key=True)
    model_id: Mapped[int] = mapped_column(ForeignKey("risk_model.id"))
    version_number: Mapped[int]
    key: Mapped[str | None] = mapped_column(String(NAME_LEN))
    inputs: Mapped[dict[str, Any]]
    eta: Mapped[float] = mapped_column(Float)
    se_eta: Mapped[float] = mapped_column(Float)
    probability: Mapped[float] = mapped_column(Float)
    created_at: Mapped[datetime] = mapped_column(default=utcnow)


class Outcome(Base):
    """The observed 0/1 outcome of a score; at most one per score (idempotent ingestion).

    The row also carries a copy of its score's prediction (``version_number``, ``eta``,
    ``se_eta``, ``probability``, ``scored_at`` = the score's ``created_at``). Scores never
    change, so the copy cannot go stale, and calibration over a window then reads this one
    table sequentially instead of joining a million random score-id look-ups. ``model_id``
    repeats the score's model for the same reason.
    """

    __tablename__ = "outcome"
    __table_args__ = (
        CheckConstraint("outcome IN (0, 1)", name="outcome_binary"),
        ForeignKeyConstraint(
            ["model_id", "version_number"], ["model_version.model_id", "model_version.number"]
        ),
        Index(None, "model_id", "observed_at"),
        Index(None, "model_id", "scored_at"),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    score_id: Mapped[str] = mapped_column(ForeignKey("score.id"), unique=True)
    model_id: Mapped[int] = mapped_column(ForeignKey("risk_model.id"))
    outcome: Mapped[int] = mapped_column(SmallInteger)
    observed_at: Mapped[datetime]
    received_at: Mapped[datetime] = mapped_column(default=utcnow)
    version_number: Mapped[int]
    eta: Mapped[float] = mapped_column(Float)
    se_eta: Mapped[float] = mapped_column(Float)
    probability: Mapped[float] = mapped_column(Float)
    scored_at: Mapped[datetime]


class AlertRecord(Base):
    """A monitoring alert (a measure crossed its threshold); ``resolved_at`` closes it."""

    __tablename__ = "alert"
    __table_args__ = (
        Index(None, "model_id", "raised_at"),
        UniqueConstraint("model_id", "dedup_key"),  # one stored alert per condition
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    model_id: Mapped[int] = mapped_column(ForeignKey("risk_model.id"))
    version_number: Mapped[int | None]
    measure: Mapped[str] = mapped_column(String(64))
    value: Mapped[float] = mapped_column(Float)
    threshold: Mapped[float] = mapped_column(Float)
    direction: Mapped[str] = mapped_column(String(16))
    window: Mapped[dict[str, Any]] = mapped_column(default=dict)
    raised_at: Mapped[datetime] = mapped_column(default=utcnow)
    resolved_at: Mapped[datetime | None]
    details: Mapped[dict[str, Any]] = mapped_column(default=dict)
    # hex SHA-256 of the raising condition (measure, version, window), set by the monitor
    dedup_key: Mapped[str | None] = mapped_column(String(64))


class CusumLimitRecord(Base):
    """A simulated CUSUM control limit, kept so that a restart or another worker reuses it.

    ``key_digest`` is the hex SHA-256 of ``depends_on``: everything the limit depends on (segment,
    size class, target ARL, simulation size and seed, odds ratio, method); ``control_limit`` the
    :class:`service.stats.cusum.ControlLimit` fields. Rows are written once, never updated.
    """

    __tablename__ = "cusum_limit"
    __table_args__ = (UniqueConstraint("model_id", "key_digest"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    model_id: Mapped[int] = mapped_column(ForeignKey("risk_model.id"))
    key_digest: Mapped[str] = mapped_column(String(64))
    h: Mapped[float] = mapped_column(Float)
    depends_on: Mapped[dict[str, Any]] = mapped_column(default=dict)
    control_limit: Mapped[dict[str, Any]] = mapped_column(default=dict)
    created_at: Mapped[datetime] = mapped_column(default=utcnow)


class OutcomeColumnBlock(Base):
    """A packed copy of one model's outcome rows with ``after_id < id <= last_id`` (all of
    them when written), so a new process loads its outcome snapshot in one read instead of
    building it row by row. ``data`` holds the columns one after another (layout named in
    ``layout``); outcome rows never change, so a block is written once, and deleted only when
    a check finds it incomplete (see service/monitoring/outcome_blocks.py)."""

    __tablename__ = "outcome_column_block"
    __table_args__ = (UniqueConstraint("model_id", "after_id"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    model_id: Mapped[int] = mapped_column(ForeignKey("risk_model.id"))
    after_id: Mapped[int] = mapped_column(BigInteger)
    last_id: Mapped[int] = mapped_column(BigInteger)
    n_rows: Mapped[int] = mapped_column(Integer)
    latest_received_at: Mapped[datetime]
    layout: Mapped[str] = mapped_column(String(200))
    data: Mapped[bytes] = mapped_column(LargeBinary)
    created_at: Mapped[datetime] = mapped_column(default=utcnow)


class AuditEvent(Base):
    """Who (key id) did what (action) to which model, and when."""

    __tablename__ = "audit_event"
    __table_args__ = (Index(None, "at"),)

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    at: Mapped[datetime] = mapped_column(default=utcnow)
    key_id: Mapped[int | None] = mapped_column(ForeignKey("api_key.id"))
    action: Mapped[str] = mapped_column(String(64))
    model_name: Mapped[str | None] = mapped_column(String(NAME_LEN))
    details: Mapped[dict[str, Any]] = mapped_column(default=dict)


class RefitRun(Base):
    """One refit attempt and its decision (``result``)."""

    __tablename__ = "refit_run"
    __table_args__ = (
        CheckConstraint(f"status IN ({_in(REFIT_STATUSES)})", name="status"),
        Index(None, "model_id", "started_at"),
    )

    id: Mapped[int] = mapped_column(Integer, primary_key=True)
    model_id: Mapped[int] = mapped_column(ForeignKey("risk_model.id"))
    status: Mapped[str] = mapped_column(String(16), default="running")
    started_at: Mapped[datetime] = mapped_column(default=utcnow)
    finished_at: Mapped[datetime | None]
    request_fingerprint: Mapped[str] = mapped_column(String(64))
    result: Mapped[dict[str, Any]] = mapped_column(default=dict)
    key_id: Mapped[int | None] = mapped_column(ForeignKey("api_key.id"))


class RefitLock(Base):
    """At most one row per model while a refit runs; ``expires_at`` is its lease, renewed by
    the holder (see module docstring and models_store/refits.py)."""

    __tablename__ = "refit_lock"

    model_id: Mapped[int] = mapped_column(ForeignKey("risk_model.id"), primary_key=True)
    token: Mapped[str] = mapped_column(String(36))
    acquired_at: Mapped[datetime]
    expires_at: Mapped[datetime]


# --- immutability of versions ------------------------------------------------------------------


class ImmutableVersionError(RuntimeError):
    """A programming error: something tried to change or delete a stored model version."""


@event.listens_for(ModelVersion, "before_update")
@event.listens_for(ModelVersion, "before_delete")
def _refuse_version_change(mapper: Mapper[Any], connection: Any, target: ModelVersion) -> None:
    raise ImmutableVersionError(
        f"model_version {target.model_id}/{target.number} is immutable; add a new version instead"
    )


@event.listens_for(Session, "do_orm_execute")
def _refuse_bulk_version_update(state: ORMExecuteState) -> None:
    if (state.is_update or state.is_delete) and any(
        m.class_ is ModelVersion for m in state.all_mappers
    ):
        raise ImmutableVersionError(
            "UPDATE/DELETE of model_version refused: versions are immutable"
        )
