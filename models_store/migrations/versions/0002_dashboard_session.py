"""Dashboard sessions kept in the store, so that signing out (or revoking the key) ends them.

The cookie holds a random token; ``token_hash`` is its SHA-256 (hex). See
``service/api/dashboard_session.py``.

Revision ID: 0002
Revises: 0001
Create Date: 2026-12-04 17:10:00
"""

from __future__ import annotations

from collections.abc import Sequence

import sqlalchemy as sa
from alembic import op

revision: str = "0002"
down_revision: str | None = "0001"
branch_labels: str | Sequence[str] | None = None
depends_on: str | Sequence[str] | None = None

UTC_TIMESTAMP = sa.DateTime(timezone=True)


def upgrade() -> None:
    op.create_table(
        "dashboard_session",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("token_hash", sa.String(length=64), nullable=False),
        sa.Column("key_id", sa.Integer(), nullable=False),
        sa.Column("created_at", UTC_TIMESTAMP, nullable=False),
        sa.Column("expires_at", UTC_TIMESTAMP, nullable=False),
        sa.Column("revoked_at", UTC_TIMESTAMP, nullable=True),
        sa.ForeignKeyConstraint(
            ["key_id"], ["api_key.id"], name=op.f("fk_dashboard_session_key_id_api_key")
        ),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_dashboard_session")),
        sa.UniqueConstraint("token_hash", name=op.f("uq_dashboard_session_token_hash")),
    )
    op.create_index(op.f("ix_dashboard_session_key_id"), "dashboard_session", ["key_id"])


def downgrade() -> None:
    op.drop_index(op.f("ix_dashboard_session_key_id"), table_name="dashboard_session")
    op.drop_table("dashboard_session")
