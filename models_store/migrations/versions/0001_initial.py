"""Initial schema: every table of the store (see models_store/orm.py for what each holds).

Timestamps are ``timestamptz`` on PostgreSQL and naive-UTC text on SQLite (the ORM's UTCDateTime
marks them UTC again on read). Constraint names come from the naming convention in orm.py.

Revision ID: 0001
Revises: (none)
Create Date: 2026-12-01 21:44:13.172256
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0001"
down_revision: str | None = None
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

UTC_TIMESTAMP = sa.DateTime(timezone=True)


def upgrade() -> None:
    op.create_table(
        "api_key",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(length=200), nullable=False),
        sa.Column("role", sa.String(length=16), nullable=False),
        sa.Column("key_hash", sa.String(length=128), nullable=False),
        sa.Column("prefix", sa.String(length=16), nullable=False),
        sa.Column("created_at", UTC_TIMESTAMP, nullable=False),
        sa.Column("revoked_at", UTC_TIMESTAMP, nullable=True),
        sa.Column("last_used_at", UTC_TIMESTAMP, nullable=True),
        sa.CheckConstraint("role IN ('scorer', 'modeler', 'admin')", name=op.f("ck_api_key_role")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_api_key")),
        sa.UniqueConstraint("key_hash", name=op.f("uq_api_key_key_hash")),
    )
    op.create_table(
        "risk_model",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("name", sa.String(length=200), nullable=False),
        sa.Column("description", sa.Text(), nullable=False),
        sa.Column("created_at", UTC_TIMESTAMP, nullable=False),
        sa.Column("alert_thresholds", sa.JSON(), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_risk_model")),
        sa.UniqueConstraint("name", name=op.f("uq_risk_model_name")),
    )
    op.create_table(
        "alert",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("version_number", sa.Integer(), nullable=True),
        sa.Column("measure", sa.String(length=64), nullable=False),
        sa.Column("value", sa.Float(), nullable=False),
        sa.Column("threshold", sa.Float(), nullable=False),
        sa.Column("direction", sa.String(length=16), nullable=False),
        sa.Column("window", sa.JSON(), nullable=False),
        sa.Column("raised_at", UTC_TIMESTAMP, nullable=False),
        sa.Column("resolved_at", UTC_TIMESTAMP, nullable=True),
        sa.Column("details", sa.JSON(), nullable=False),
        sa.Column("dedup_key", sa.String(length=64), nullable=True),
        sa.ForeignKeyConstraint(
            ["model_id"], ["risk_model.id"], name=op.f("fk_alert_model_id_risk_model")
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_alert")),
        sa.UniqueConstraint("model_id", "dedup_key", name=op.f("uq_alert_model_id_dedup_key")),
    )
    op.create_index(op.f("ix_alert_model_id_raised_at"), "alert", ["model_id", "raised_at"])

    op.create_table(
        "audit_event",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("at", UTC_TIMESTAMP, nullable=False),
        sa.Column("key_id", sa.Integer(), nullable=True),
        sa.Column("action", sa.String(length=64), nullable=False),
        sa.Column("model_name", sa.String(length=200), nullable=True),
        sa.Column("details", sa.JSON(), nullable=False),
        sa.ForeignKeyConstraint(
            ["key_id"], ["api_key.id"], name=op.f("fk_audit_event_key_id_api_key")
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_audit_event")),
    )
    op.create_index(op.f("ix_audit_event_at"), "audit_event", ["at"])

    op.create_table(
        "model_version",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("number", sa.Integer(), nullable=False),
        sa.Column("spec", sa.JSON(), nullable=False),
        sa.Column("encoding", sa.JSON(), nullable=False),
        sa.Column("term_names", sa.JSON(), nullable=False),
        sa.Column("coef", sa.JSON(), nullable=False),
        sa.Column("cov", sa.JSON(), nullable=False),
        sa.Column("fit_stats", sa.JSON(), nullable=False),
        sa.Column("term_table", sa.JSON(), nullable=False),
        sa.Column("method", sa.String(length=16), nullable=False),
        sa.Column("options", sa.JSON(), nullable=False),
        sa.Column("training_ranges", sa.JSON(), nullable=False),
        sa.Column("reference_distributions", sa.JSON(), nullable=False),
        sa.Column("data_fingerprint", sa.String(length=64), nullable=False),
        sa.Column("n_obs", sa.Integer(), nullable=False),
        sa.Column("n_events", sa.Float(), nullable=False),
        sa.Column("parent_number", sa.Integer(), nullable=True),
        sa.Column("origin", sa.String(length=16), nullable=False),
        sa.Column("origin_details", sa.JSON(), nullable=False),
        sa.Column("note", sa.Text(), nullable=False),
        sa.Column("created_at", UTC_TIMESTAMP, nullable=False),
        sa.Column("created_by_key_id", sa.Integer(), nullable=True),
        sa.CheckConstraint(
            "origin IN ('fit', 'intercept', 'recalibrate', 'refit')",
            name=op.f("ck_model_version_origin"),
        ),
        sa.CheckConstraint("number >= 1", name=op.f("ck_model_version_number_positive")),
        sa.ForeignKeyConstraint(
            ["created_by_key_id"],
            ["api_key.id"],
            name=op.f("fk_model_version_created_by_key_id_api_key"),
        ),
        sa.ForeignKeyConstraint(
            ["model_id"], ["risk_model.id"], name=op.f("fk_model_version_model_id_risk_model")
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_model_version")),
        sa.UniqueConstraint("model_id", "number", name=op.f("uq_model_version_model_id_number")),
    )
    op.create_table(
        "refit_lock",
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("token", sa.String(length=36), nullable=False),
        sa.Column("acquired_at", UTC_TIMESTAMP, nullable=False),
        sa.Column("expires_at", UTC_TIMESTAMP, nullable=False),
        sa.ForeignKeyConstraint(
            ["model_id"], ["risk_model.id"], name=op.f("fk_refit_lock_model_id_risk_model")
        ),
        sa.PrimaryKeyConstraint("model_id", name=op.f("pk_refit_lock")),
    )
    op.create_table(
        "refit_run",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("status", sa.String(length=16), nullable=False),
        sa.Column("started_at", UTC_TIMESTAMP, nullable=False),
        sa.Column("finished_at", UTC_TIMESTAMP, nullable=True),
        sa.Column("request_fingerprint", sa.String(length=64), nullable=False),
        sa.Column("result", sa.JSON(), nullable=False),
        sa.Column("key_id", sa.Integer(), nullable=True),
        sa.CheckConstraint(
            "status IN ('running', 'succeeded', 'failed')", name=op.f("ck_refit_run_status")
        ),
        sa.ForeignKeyConstraint(
            ["key_id"], ["api_key.id"], name=op.f("fk_refit_run_key_id_api_key")
        ),
        sa.ForeignKeyConstraint(
            ["model_id"], ["risk_model.id"], name=op.f("fk_refit_run_model_id_risk_model")
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_refit_run")),
    )
    op.create_index(
        op.f("ix_refit_run_model_id_started_at"), "refit_run", ["model_id", "started_at"]
    )

    op.create_table(
        "champion_change",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("seq", sa.Integer(), nullable=False),
        sa.Column("version_number", sa.Integer(), nullable=False),
        sa.Column("previous_version_number", sa.Integer(), nullable=True),
        sa.Column("reason", sa.Text(), nullable=False),
        sa.Column("changed_at", UTC_TIMESTAMP, nullable=False),
        sa.Column("changed_by_key_id", sa.Integer(), nullable=True),
        sa.ForeignKeyConstraint(
            ["changed_by_key_id"],
            ["api_key.id"],
            name=op.f("fk_champion_change_changed_by_key_id_api_key"),
        ),
        sa.ForeignKeyConstraint(
            ["model_id", "version_number"],
            ["model_version.model_id", "model_version.number"],
            name=op.f("fk_champion_change_model_id_version_number_model_version"),
        ),
        sa.ForeignKeyConstraint(
            ["model_id"], ["risk_model.id"], name=op.f("fk_champion_change_model_id_risk_model")
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_champion_change")),
        sa.UniqueConstraint("model_id", "seq", name=op.f("uq_champion_change_model_id_seq")),
    )
    op.create_table(
        "score",
        sa.Column("id", sa.String(length=36), nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("version_number", sa.Integer(), nullable=False),
        sa.Column("key", sa.String(length=200), nullable=True),
        sa.Column("inputs", sa.JSON(), nullable=False),
        sa.Column("eta", sa.Float(), nullable=False),
        sa.Column("se_eta", sa.Float(), nullable=False),
        sa.Column("probability", sa.Float(), nullable=False),
        sa.Column("created_at", UTC_TIMESTAMP, nullable=False),
        sa.ForeignKeyConstraint(
            ["model_id", "version_number"],
            ["model_version.model_id", "model_version.number"],
            name=op.f("fk_score_model_id_version_number_model_version"),
        ),
        sa.ForeignKeyConstraint(
            ["model_id"], ["risk_model.id"], name=op.f("fk_score_model_id_risk_model")
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_score")),
        sqlite_with_rowid=False,  # rows live in the id B-tree (see models_store.orm.Score)
    )
    op.create_index(
        "uq_score_model_id_key",
        "score",
        ["model_id", "key"],
        unique=True,
        sqlite_where=sa.text("key IS NOT NULL"),
        postgresql_where=sa.text("key IS NOT NULL"),
    )
    op.create_index(op.f("ix_score_model_id_created_at"), "score", ["model_id", "created_at"])

    op.create_table(
        "outcome",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("score_id", sa.String(length=36), nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("outcome", sa.SmallInteger(), nullable=False),
        sa.Column("observed_at", UTC_TIMESTAMP, nullable=False),
        sa.Column("received_at", UTC_TIMESTAMP, nullable=False),
        # copy of the score's prediction, so calibration reads this table alone
        sa.Column("version_number", sa.Integer(), nullable=False),
        sa.Column("eta", sa.Float(), nullable=False),
        sa.Column("se_eta", sa.Float(), nullable=False),
        sa.Column("probability", sa.Float(), nullable=False),
        sa.Column("scored_at", UTC_TIMESTAMP, nullable=False),
        sa.CheckConstraint("outcome IN (0, 1)", name=op.f("ck_outcome_outcome_binary")),
        sa.ForeignKeyConstraint(
            ["model_id", "version_number"],
            ["model_version.model_id", "model_version.number"],
            name=op.f("fk_outcome_model_id_version_number_model_version"),
        ),
        sa.ForeignKeyConstraint(
            ["model_id"], ["risk_model.id"], name=op.f("fk_outcome_model_id_risk_model")
        ),
        sa.ForeignKeyConstraint(["score_id"], ["score.id"], name=op.f("fk_outcome_score_id_score")),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_outcome")),
        sa.UniqueConstraint("score_id", name=op.f("uq_outcome_score_id")),
    )
    op.create_index(op.f("ix_outcome_model_id_observed_at"), "outcome", ["model_id", "observed_at"])
    op.create_index(op.f("ix_outcome_model_id_scored_at"), "outcome", ["model_id", "scored_at"])

    op.create_table(
        "cusum_limit",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("key_digest", sa.String(length=64), nullable=False),
        sa.Column("h", sa.Float(), nullable=False),
        sa.Column("depends_on", sa.JSON(), nullable=False),
        sa.Column("control_limit", sa.JSON(), nullable=False),
        sa.Column("created_at", UTC_TIMESTAMP, nullable=False),
        sa.ForeignKeyConstraint(
            ["model_id"], ["risk_model.id"], name=op.f("fk_cusum_limit_model_id_risk_model")
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_cusum_limit")),
        sa.UniqueConstraint(
            "model_id", "key_digest", name=op.f("uq_cusum_limit_model_id_key_digest")
        ),
    )

    op.create_table(
        "outcome_column_block",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("model_id", sa.Integer(), nullable=False),
        sa.Column("after_id", sa.BigInteger(), nullable=False),
        sa.Column("last_id", sa.BigInteger(), nullable=False),
        sa.Column("n_rows", sa.Integer(), nullable=False),
        sa.Column("latest_received_at", UTC_TIMESTAMP, nullable=False),
        sa.Column("layout", sa.String(length=200), nullable=False),
        sa.Column("data", sa.LargeBinary(), nullable=False),
        sa.Column("created_at", UTC_TIMESTAMP, nullable=False),
        sa.ForeignKeyConstraint(
            ["model_id"],
            ["risk_model.id"],
            name=op.f("fk_outcome_column_block_model_id_risk_model"),
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_outcome_column_block")),
        sa.UniqueConstraint(
            "model_id", "after_id", name=op.f("uq_outcome_column_block_model_id_after_id")
        ),
    )


def downgrade() -> None:
    op.drop_table("outcome_column_block")
    op.drop_table("cusum_limit")
    op.drop_index(op.f("ix_outcome_model_id_observed_at"), table_name="outcome")
    op.drop_index(op.f("ix_outcome_model_id_scored_at"), table_name="outcome")

    op.drop_table("outcome")
    op.drop_index(op.f("ix_score_model_id_created_at"), table_name="score")
    op.drop_index("uq_score_model_id_key", table_name="score")

    op.drop_table("score")
    op.drop_table("champion_change")
    op.drop_index(op.f("ix_refit_run_model_id_started_at"), table_name="refit_run")

    op.drop_table("refit_run")
    op.drop_table("refit_lock")
    op.drop_table("model_version")
    op.drop_index(op.f("ix_audit_event_at"), table_name="audit_event")

    op.drop_table("audit_event")
    op.drop_index(op.f("ix_alert_model_id_raised_at"), table_name="alert")

    op.drop_table("alert")
    op.drop_table("risk_model")
    op.drop_table("api_key")
