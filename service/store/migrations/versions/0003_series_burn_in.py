"""Series burn-in: the periods dropped at the start of each series, kept with its inputs so a
report redraws (and a verdict is recomputed from) exactly what was assessed.

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-03
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = "0003"
down_revision = "0002"
branch_labels = None
depends_on = None


def upgrade() -> None:
    with op.batch_alter_table("series_inputs") as batch:
        batch.add_column(sa.Column("burn_in", sa.Integer(), nullable=True))


def downgrade() -> None:
    with op.batch_alter_table("series_inputs") as batch:
        batch.drop_column("burn_in")
