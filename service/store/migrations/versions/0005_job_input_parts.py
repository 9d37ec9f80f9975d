"""A job's input as sent, in parts (a big Parquet upload assessed chunk by chunk).

Revision ID: 0005
Revises: 0004
Create Date: 2026-12-04
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0005"
down_revision = "0004"
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "job_input_parts",
        sa.Column("job_id", sa.String(32), primary_key=True),
        sa.Column("position", sa.Integer(), primary_key=True),
        sa.Column("data", sa.LargeBinary(), nullable=False),
    )


def downgrade() -> None:
    op.drop_table("job_input_parts")
