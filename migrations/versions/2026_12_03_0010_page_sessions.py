"""Sign-in sessions of the read-only pages.

A browser signs in with a key once; the cookie it gets holds a random token whose
SHA-256 is stored here with the key it stands for and when it expires. The pages
accept the cookie; the API never does.

Revision ID: 0010
Revises: 0009
Create Date: 2026-12-03
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0010"
down_revision = "0009"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "page_sessions",
        sa.Column("id", sa.Integer(), autoincrement=True, nullable=False),
        sa.Column("token_hash", sa.String(64), nullable=False),
        sa.Column("key_id", sa.String(32), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("expires_at", sa.DateTime(timezone=True), nullable=False),
        sa.PrimaryKeyConstraint("id", name=op.f("pk_page_sessions")),
        sa.UniqueConstraint("token_hash", name=op.f("uq_page_sessions_token_hash")),
    )
    op.create_index(op.f("ix_page_sessions_expires_at"), "page_sessions", ["expires_at"])


def downgrade() -> None:
    op.drop_index(op.f("ix_page_sessions_expires_at"), table_name="page_sessions")
    op.drop_table("page_sessions")
