"""Rails keep a summary of their head revision (supply, capacitance, load model, FET) for lists.

Revision ID: 0004
Revises: 0003
Create Date: 2026-12-02
"""

from __future__ import annotations

import json

import sqlalchemy as sa
from alembic import op
from sqlalchemy.dialects import postgresql

revision = '0004'
down_revision = '0003'
branch_labels = None
depends_on = None

JSON = sa.JSON().with_variant(postgresql.JSONB(), 'postgresql')


def _summary(doc: dict) -> dict:
    return {"v_nom": doc["supply"]["v_nom"], "c_nom": doc["load"]["c_nom"], "load_model": doc["load"]["model"],
            "fet": doc["fet"]["name"]}


def upgrade() -> None:
    # A plain ADD COLUMN on both engines: on SQLite a batch (copy-and-rename) of `rails` would
    # drop the old table, and with foreign keys on that cascades into the revisions.
    op.add_column('rails', sa.Column('summary', JSON, nullable=False, server_default=sa.text("'{}'")))
    conn = op.get_bind()
    rails = sa.table('rails', sa.column('id', sa.Integer), sa.column('head_n', sa.Integer), sa.column('summary', JSON))
    revisions = sa.table('rail_revisions', sa.column('rail_id', sa.Integer), sa.column('n', sa.Integer),
                         sa.column('document', JSON))
    heads = conn.execute(sa.select(revisions.c.rail_id, revisions.c.document).select_from(
        revisions.join(rails, (rails.c.id == revisions.c.rail_id) & (rails.c.head_n == revisions.c.n)))).all()
    for rail_id, document in heads:
        doc = json.loads(document) if isinstance(document, str) else document
        conn.execute(rails.update().where(rails.c.id == rail_id).values(summary=_summary(doc)))


def downgrade() -> None:
    op.execute("ALTER TABLE rails DROP COLUMN summary")  # native on PostgreSQL and SQLite >= 3.35
