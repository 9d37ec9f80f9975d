"""Initial schema: assessments, series results and inputs, policies, tokens, idempotency keys.

Revision ID: 0001
Revises:
Create Date: 2026-12-01
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0001"
down_revision = None
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "assessments",
        sa.Column("seq", sa.Integer(), primary_key=True, autoincrement=True),
        sa.Column("id", sa.String(32), nullable=False, unique=True),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("model", sa.String(200), nullable=False),
        sa.Column("version", sa.String(200), nullable=False),
        sa.Column("verdict", sa.String(8), nullable=False),
        sa.Column("n_series", sa.Integer(), nullable=False),
        sa.Column("n_failed", sa.Integer(), nullable=False),
        sa.Column("n_warned", sa.Integer(), nullable=False),
        sa.Column("policy_name", sa.String(200), nullable=False),
        sa.Column("policy_version", sa.Integer(), nullable=False),
        sa.Column("policy_document", sa.Text(), nullable=False),
        sa.Column("result", sa.Text(), nullable=False),
    )
    op.create_index("ix_assessments_model_seq", "assessments", ["model", "seq"])
    op.create_index("ix_assessments_model_version_seq", "assessments", ["model", "version", "seq"])
    op.create_table(
        "series_results",
        sa.Column(
            "assessment_seq",
            sa.Integer(),
            sa.ForeignKey("assessments.seq", ondelete="CASCADE"),
            primary_key=True,
        ),
        sa.Column("position", sa.Integer(), primary_key=True),
        sa.Column("series_id", sa.String(200), nullable=False),
        sa.Column("verdict", sa.String(8), nullable=False),
        sa.Column("n_obs", sa.Integer(), nullable=False),
        sa.Column("result", sa.Text(), nullable=False),
    )
    op.create_table(
        "series_inputs",
        sa.Column(
            "assessment_seq",
            sa.Integer(),
            sa.ForeignKey("assessments.seq", ondelete="CASCADE"),
            primary_key=True,
        ),
        sa.Column("position", sa.Integer(), primary_key=True),
        sa.Column("series_id", sa.String(200), nullable=False),
        sa.Column("weight", sa.Float(), nullable=True),
        sa.Column("actuals", sa.LargeBinary(), nullable=False),
        sa.Column("fitted", sa.LargeBinary(), nullable=False),
        sa.Column("timestamps", sa.Text(), nullable=True),
        sa.Column("holdout_actuals", sa.LargeBinary(), nullable=True),
        sa.Column("holdout_forecasts", sa.LargeBinary(), nullable=True),
        sa.Column("holdout_lower", sa.LargeBinary(), nullable=True),
        sa.Column("holdout_upper", sa.LargeBinary(), nullable=True),
        sa.Column("holdout_level", sa.Float(), nullable=True),
        sa.Column("holdout_timestamps", sa.Text(), nullable=True),
    )
    op.create_table(
        "policies",
        sa.Column("id", sa.Integer(), primary_key=True, autoincrement=True),
        sa.Column("name", sa.String(200), nullable=False),
        sa.Column("version", sa.Integer(), nullable=False),
        sa.Column("document", sa.Text(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.UniqueConstraint("name", "version", name="uq_policies_name_version"),
    )
    op.create_table(
        "tokens",
        sa.Column("id", sa.String(32), primary_key=True),
        sa.Column("token_hash", sa.String(64), nullable=False, unique=True),
        sa.Column("scopes", sa.String(200), nullable=False),
        sa.Column("label", sa.String(200), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("revoked_at", sa.DateTime(timezone=True), nullable=True),
    )
    op.create_table(
        "idempotency_keys",
        sa.Column("key", sa.String(200), primary_key=True),
        sa.Column("body_hash", sa.String(64), nullable=False),
        sa.Column(
            "assessment_seq",
            sa.Integer(),
            sa.ForeignKey("assessments.seq", ondelete="CASCADE"),
            nullable=False,
        ),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
    )


def downgrade() -> None:
    op.drop_table("idempotency_keys")
    op.drop_table("tokens")
    op.drop_table("policies")
    op.drop_table("series_inputs")
    op.drop_table("series_results")
    op.drop_index("ix_assessments_model_version_seq", table_name="assessments")
    op.drop_index("ix_assessments_model_seq", table_name="assessments")
    op.drop_table("assessments")
