"""Archived sign-off reports: a board's report as a PDF, kept when its rails entered a state that
archives the record; append-only.

- archived_reports: board and product (neither deletable while it has one), created_at, created_by,
  state, rails (JSON: each rail's revision and sha256), occasion (JSON: the entry that archived it),
  engine_version, sha256 (of the PDF), size, pdf (the bytes).

The database refuses UPDATE and DELETE on archived_reports (triggers on both engines, as on the
audit trail).

Revision ID: 0010
Revises: 0009
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op
from sqlalchemy.dialects import postgresql

revision = '0010'
down_revision = '0009'
branch_labels = None
depends_on = None

APPEND_ONLY = "archived reports are append-only: they cannot be changed or deleted"


def _json() -> sa.types.TypeEngine:
    return sa.JSON().with_variant(postgresql.JSONB(), "postgresql")


def upgrade() -> None:
    op.create_table(
        "archived_reports",
        sa.Column("id", sa.Integer(), nullable=False),
        sa.Column("board_id", sa.Integer(), nullable=False),
        sa.Column("product_id", sa.Integer(), nullable=False),
        sa.Column("created_at", sa.DateTime(timezone=True), nullable=False),
        sa.Column("created_by", sa.String(length=200), nullable=False),
        sa.Column("state", sa.String(length=100), nullable=False),
        sa.Column("rails", _json(), nullable=False),
        sa.Column("occasion", _json(), nullable=False),
        sa.Column("engine_version", sa.String(length=20), nullable=False),
        sa.Column("sha256", sa.String(length=64), nullable=False),
        sa.Column("size", sa.Integer(), nullable=False),
        sa.Column("pdf", sa.LargeBinary(), nullable=False),
        sa.ForeignKeyConstraint(["board_id"], ["boards.id"], ondelete="RESTRICT"),
        sa.ForeignKeyConstraint(["product_id"], ["products.id"], ondelete="RESTRICT"),
        sa.PrimaryKeyConstraint("id"),
    )
    op.create_index(op.f("ix_archived_reports_board_id"), "archived_reports", ["board_id"], unique=False)
    if op.get_bind().dialect.name == 'postgresql':
        op.execute(f"""
            CREATE FUNCTION archived_reports_append_only() RETURNS trigger LANGUAGE plpgsql AS $$
            BEGIN
                RAISE EXCEPTION '{APPEND_ONLY}' USING ERRCODE = 'insufficient_privilege';
            END $$""")
        op.execute("CREATE TRIGGER archived_reports_no_change BEFORE UPDATE OR DELETE ON archived_reports "
                   "FOR EACH ROW EXECUTE FUNCTION archived_reports_append_only()")
        op.execute("CREATE TRIGGER archived_reports_no_truncate BEFORE TRUNCATE ON archived_reports "
                   "FOR EACH STATEMENT EXECUTE FUNCTION archived_reports_append_only()")
    else:
        for event in ('UPDATE', 'DELETE'):
            op.execute(f"CREATE TRIGGER archived_reports_no_{event.lower()} BEFORE {event} ON archived_reports "
                       f"BEGIN SELECT RAISE(ABORT, '{APPEND_ONLY}'); END")


def downgrade() -> None:
    if op.get_bind().dialect.name == 'postgresql':
        op.execute("DROP TRIGGER IF EXISTS archived_reports_no_truncate ON archived_reports")
        op.execute("DROP TRIGGER IF EXISTS archived_reports_no_change ON archived_reports")
        op.execute("DROP FUNCTION IF EXISTS archived_reports_append_only()")
    op.drop_index(op.f("ix_archived_reports_board_id"), table_name="archived_reports")
    op.drop_table("archived_reports")
