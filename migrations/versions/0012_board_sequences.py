"""Board power-up sequences: a board-level document with its own revisions, results and approvals.

- board_sequences: one per board (board_id unique, deleted with the board), head_n, head_sha256.
- board_sequence_revisions: immutable revisions of the sequence document (schema railsign.sequence/1).
- board_sequence_results: the board start-up of a revision with the rails as they were (inputs_sha256),
  per engine version.
- board_sequence_approvals: a reviewer's approval of a sequence as one result read it; stale_at and
  stale_reason once the sequence or one of its rails has a newer revision.

Revision ID: 0012
Revises: 0011
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op
from sqlalchemy.dialects import postgresql

revision = '0012'
down_revision = '0011'
branch_labels = None
depends_on = None


def _json() -> sa.types.TypeEngine:
    return sa.JSON().with_variant(postgresql.JSONB(), "postgresql")


def upgrade() -> None:
    op.create_table(
        "board_sequences",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("board_id", sa.Integer(), nullable=False),
        sa.Column("head_n", sa.Integer(), nullable=False),
        sa.Column("head_sha256", sa.String(length=64), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("updated_at", sa.DateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(["board_id"], ["boards.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("board_id"),
    )
    op.create_table(
        "board_sequence_revisions",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("sequence_id", sa.Integer(), nullable=False),
        sa.Column("n", sa.Integer(), nullable=False),
        sa.Column("document", _json(), nullable=False),
        sa.Column("sha256", sa.String(length=64), nullable=False),
        sa.Column("author_id", sa.Integer(), nullable=True),
        sa.Column("author_name", sa.String(length=200), nullable=False),
        sa.Column("message", sa.Text(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(["author_id"], ["users.id"]),
        sa.ForeignKeyConstraint(["sequence_id"], ["board_sequences.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("sequence_id", "n"),
    )
    op.create_index(op.f("ix_board_sequence_revisions_sequence_id"), "board_sequence_revisions", ["sequence_id"],
                    unique=False)
    op.create_table(
        "board_sequence_results",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("sequence_id", sa.Integer(), nullable=False),
        sa.Column("revision_n", sa.Integer(), nullable=False),
        sa.Column("inputs_sha256", sa.String(length=64), nullable=False),
        sa.Column("engine_version", sa.String(length=20), nullable=False),
        sa.Column("verdict", sa.String(length=10), nullable=False),
        sa.Column("result", _json(), nullable=False),
        sa.Column("duration_s", sa.Double(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.ForeignKeyConstraint(["sequence_id"], ["board_sequences.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
        sa.UniqueConstraint("sequence_id", "inputs_sha256", "engine_version"),
    )
    op.create_index(op.f("ix_board_sequence_results_sequence_id"), "board_sequence_results", ["sequence_id"],
                    unique=False)
    op.create_table(
        "board_sequence_approvals",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("sequence_id", sa.Integer(), nullable=False),
        sa.Column("revision_n", sa.Integer(), nullable=False),
        sa.Column("inputs_sha256", sa.String(length=64), nullable=False),
        sa.Column("result_id", sa.Integer(), nullable=True),
        sa.Column("reviewer_id", sa.Integer(), nullable=False),
        sa.Column("reviewer_name", sa.String(length=200), nullable=False),
        sa.Column("comment", sa.Text(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("stale_at", sa.DateTime(timezone=True), nullable=True),
        sa.Column("stale_reason", sa.Text(), server_default=sa.text("''"), nullable=False),
        sa.ForeignKeyConstraint(["result_id"], ["board_sequence_results.id"], ondelete="SET NULL"),
        sa.ForeignKeyConstraint(["reviewer_id"], ["users.id"]),
        sa.ForeignKeyConstraint(["sequence_id"], ["board_sequences.id"], ondelete="CASCADE"),
        sa.PrimaryKeyConstraint("id"),
    )
    op.create_index(op.f("ix_board_sequence_approvals_sequence_id"), "board_sequence_approvals", ["sequence_id"],
                    unique=False)


def downgrade() -> None:
    op.drop_index(op.f("ix_board_sequence_approvals_sequence_id"), table_name="board_sequence_approvals")
    op.drop_table("board_sequence_approvals")
    op.drop_index(op.f("ix_board_sequence_results_sequence_id"), table_name="board_sequence_results")
    op.drop_table("board_sequence_results")
    op.drop_index(op.f("ix_board_sequence_revisions_sequence_id"), table_name="board_sequence_revisions")
    op.drop_table("board_sequence_revisions")
    op.drop_table("board_sequences")
