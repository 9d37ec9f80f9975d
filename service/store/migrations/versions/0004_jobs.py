"""Jobs: assessments run in the background (``Prefer: respond-async``).

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-03
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0004"
down_revision = "0003"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "jobs",
        sa.Column("seq", sa.Integer(), primary_key=True, autoincrement=True),
        sa.Column("id", sa.String(32), nullable=False, unique=True),
        sa.Column("state", sa.String(8), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("started_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("updated_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("finished_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("model", sa.String(200), nullable=False),
        sa.Column("version", sa.String(200), nullable=False),
        sa.Column("n_series", sa.Integer(), nullable=False),
        sa.Column("series_done", sa.Integer(), nullable=False),
        sa.Column("input", sa.LargeBinary(), nullable=True),
        sa.Column("policy_document", sa.Text(), nullable=False),
        sa.Column("idempotency_key", sa.String(200), nullable=True, unique=True),
        sa.Column("body_hash", sa.String(64), nullable=True),
        sa.Column("assessment_id", sa.String(32), nullable=False),
        sa.Column("error", sa.Text(), nullable=True),
        sa.Column("worker", sa.String(200), nullable=True),
        sa.Column("claim", sa.String(32), nullable=True),
        sa.Column("lease_expires_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("attempts", sa.Integer(), nullable=False),
    )
    op.create_index("ix_jobs_state_seq", "jobs", ["state", "seq"])


def downgrade() -> None:
    op.drop_index("ix_jobs_state_seq", table_name="jobs")
    op.drop_table("jobs")
