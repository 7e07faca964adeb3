"""Daily risk snapshots: each product's risk counts per day, for the risk view's trend chart.

- risk_snapshots: product (deleted with it), day (UTC date), taken_at, counts (JSON: kind -> count);
  one row per product and day.

Revision ID: 0008
Revises: 0005
Create Date: 2026-12-16
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op
from sqlalchemy.dialects import postgresql

revision = '0008'
down_revision = '0005'
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "risk_snapshots",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("product_id", sa.Integer(), nullable=False),
        sa.Column("day", sa.Date(), nullable=False),
        sa.Column("taken_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("counts", sa.JSON().with_variant(postgresql.JSONB(), "postgresql"), nullable=False),
        sa.ForeignKeyConstraint(["product_id"], ["products.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("product_id", "day", name="uq_risk_snapshots_product_day"),
    )
    op.create_index(op.f("ix_risk_snapshots_product_id"), "risk_snapshots", ["product_id"], unique=False)


def downgrade() -> None:
    op.drop_index(op.f("ix_risk_snapshots_product_id"), table_name="risk_snapshots")
    op.drop_table("risk_snapshots")
