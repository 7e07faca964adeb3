"""Where a board power-up sequence stands in its team's workflow.

- board_sequence_states: one row per sequence (its state, since which revision, the inputs it was put there for,
  when and by whom). A sequence without a row (saved before this migration) stands in its workflow's initial
  state until its first change or transition writes one.

Revision ID: 0014
Revises: 0013
Create Date: 2026-12-03
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = '0014'
down_revision = '0013'
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "board_sequence_states",
        sa.Column("sequence_id", sa.Integer(), nullable=False),
        sa.Column("state", sa.String(length=100), nullable=False),
        sa.Column("revision_n", sa.Integer(), nullable=False),
        sa.Column("inputs_sha256", sa.String(length=64), nullable=False),
        sa.Column("since", sa.DateTime(timezone=True), nullable=False),
        sa.Column("changed_by", sa.String(length=200), nullable=False),
        sa.ForeignKeyConstraint(["sequence_id"], ["board_sequences.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("sequence_id"),
    )


def downgrade() -> None:
    op.drop_table("board_sequence_states")
