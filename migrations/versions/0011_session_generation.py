"""Sessions that end on the server: each user's session generation.

- users.session_generation: a counter the session cookie carries; logging out raises it, so every
  cookie issued before no longer opens a session (on every device of that user).

Revision ID: 0011
Revises: 0010
Create Date: 2026-12-02
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = '0011'
down_revision = '0010'
branch_labels = None
depends_on = None


def upgrade() -> None:
    op.add_column("users", sa.Column("session_generation", sa.Integer(), nullable=False, server_default="0"))


def downgrade() -> None:
    # a plain ALTER TABLE on SQLite (3.35 and later) too: rebuilding users would trip the tables that refer to it
    if op.get_bind().dialect.name == "sqlite":
        op.execute("ALTER TABLE users DROP COLUMN session_generation")
    else:
        op.drop_column("users", "session_generation")
