"""Waiver rules per team, review assignments, retired rails.

- signoff_rules: one row per team (deleted with it): two_person (the approval relying on a waiver
  comes from another reviewer than the one who waived; default on), fail_waiver_role (the role
  that may waive failing checks; empty: nobody), version, updated_at, updated_by. A team
  without a row has the defaults.
- review_assignments: a reviewer (user) assigned to one rail or to every rail of one board.
- rails.retired_at, rails.retired_by: a retired rail keeps its history and leaves lists.

Revision ID: 0009
Revises: 0008
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = '0009'
down_revision = '0008'
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.create_table(
        "signoff_rules",
        sa.Column("team_id", sa.Integer(), nullable=False),
        sa.Column("two_person", sa.Boolean(), server_default=sa.text("true"), nullable=False),
        sa.Column("fail_waiver_role", sa.String(length=20), nullable=True),
        sa.Column("version", sa.Integer(), nullable=False),
        sa.Column("updated_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("updated_by", sa.String(length=200), nullable=False),
        sa.ForeignKeyConstraint(["team_id"], ["teams.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("team_id"),
    )
    op.create_table(
        "review_assignments",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("reviewer_id", sa.Integer(), nullable=False),
        sa.Column("rail_id", sa.Integer(), nullable=True),
        sa.Column("board_id", sa.Integer(), nullable=True),
        sa.Column("assigned_by", sa.String(length=200), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(["board_id"], ["boards.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["rail_id"], ["rails.id"], ondelete="CASCADE"),
        sa.ForeignKeyConstraint(["reviewer_id"], ["users.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("reviewer_id", "rail_id", "board_id", name="uq_review_assignments_target"),
    )
    op.create_index(op.f("ix_review_assignments_board_id"), "review_assignments", ["board_id"], unique=False)
    op.create_index(op.f("ix_review_assignments_rail_id"), "review_assignments", ["rail_id"], unique=False)
    op.create_index(op.f("ix_review_assignments_reviewer_id"), "review_assignments", ["reviewer_id"], unique=False)
    # Plain ADD COLUMN on both engines (a SQLite batch copy of `rails` would cascade into its revisions).
    op.add_column("rails", sa.Column("retired_at", sa.DateTime(timezone=True), nullable=True))
    op.add_column("rails", sa.Column("retired_by", sa.String(length=200), nullable=False, server_default=sa.text("''")))


def downgrade() -> None:
    op.execute("ALTER TABLE rails DROP COLUMN retired_by")  # native on PostgreSQL and SQLite >= 3.35
    op.execute("ALTER TABLE rails DROP COLUMN retired_at")
    op.drop_index(op.f("ix_review_assignments_reviewer_id"), table_name="review_assignments")
    op.drop_index(op.f("ix_review_assignments_rail_id"), table_name="review_assignments")
    op.drop_index(op.f("ix_review_assignments_board_id"), table_name="review_assignments")
    op.drop_table("review_assignments")
    op.drop_table("signoff_rules")
