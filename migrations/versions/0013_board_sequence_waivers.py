"""Waivers of a board power-up sequence's failing or marginal checks.

- board_sequence_waivers: a reviewer's reasoned acceptance of one check (``check_id``: check and subject) of the
  result of one set of inputs (``inputs_sha256``, ``result_id``); stale_at and stale_reason once the sequence or
  one of the rails it names has a newer revision.

Revision ID: 0013
Revises: 0012
Create Date: 2026-12-03
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = '0013'
down_revision = '0012'
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "board_sequence_waivers",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("sequence_id", sa.Integer(), nullable=False),
        sa.Column("revision_n", sa.Integer(), nullable=False),
        sa.Column("inputs_sha256", sa.String(length=64), nullable=False),
        sa.Column("result_id", sa.Integer(), nullable=True),
        sa.Column("check_id", sa.String(length=100), nullable=False),
        sa.Column("check_title", sa.String(length=200), nullable=False),
        sa.Column("verdict", sa.String(length=10), nullable=False),
        sa.Column("reason", sa.Text(), nullable=False),
        sa.Column("reviewer_id", sa.Integer(), nullable=False),
        sa.Column("reviewer_name", sa.String(length=200), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("stale_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("stale_reason", sa.Text(), server_default=sa.text("''"), nullable=False),
        sa.ForeignKeyConstraint(["result_id"], ["board_sequence_results.id"], ondelete="SET NULL"),
        sa.ForeignKeyConstraint(["reviewer_id"], ["users.id"]),
        sa.ForeignKeyConstraint(["sequence_id"], ["board_sequences.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("sequence_id", "inputs_sha256", "check_id", "result_id",
                            name="uq_board_sequence_waivers_check_result"),
    )
    op.create_index(op.f("ix_board_sequence_waivers_sequence_id"), "board_sequence_waivers", ["sequence_id"],
                    unique=False)


def downgrade() -> None:
    op.drop_index(op.f("ix_board_sequence_waivers_sequence_id"), table_name="board_sequence_waivers")
    op.drop_table("board_sequence_waivers")
