"""Sign-off: team workflows, rail states, approvals, waivers, login throttles; append-only audit trail.

Every existing team gets the default workflow and every existing rail its initial state.
The database refuses UPDATE and DELETE on audit_entries (triggers on both engines). Note for
later migrations: on SQLite a batch alter of audit_entries rebuilds the table and drops these
triggers; such a migration must create them again (see _create_audit_guard).

Revision ID: 0003
Revises: 0002
Create Date: 2026-12-02
"""

from __future__ import annotations

from datetime import datetime, timezone

import sqlalchemy as sa
from alembic import op
from sqlalchemy.dialects import postgresql

revision = '0003'
down_revision = '0002'
branch_labels = None
depends_on = None

JSON = sa.JSON().with_variant(postgresql.JSONB(), 'postgresql')

# The default workflow as it was when this migration was written (server.workflow.DEFAULT_WORKFLOW
# may change later; a migration keeps its own copy).
_NO_DEMANDS = {"approvals": 0, "checks_pass": False, "no_stale_approvals": False}
_FULL_DEMANDS = {"approvals": 1, "checks_pass": True, "no_stale_approvals": True}
DEFAULT_WORKFLOW = {
    "name": "margin review",
    "states": [
        {"name": "in design", "initial": True, "signed_off": False,
         "description": "the designer is still changing the rail"},
        {"name": "awaiting review", "initial": False, "signed_off": False,
         "description": "the designer asks a reviewer to check the margins of the current revision"},
        {"name": "margins accepted", "initial": False, "signed_off": True,
         "description": "a reviewer approved this revision; every check passes or has a waiver"},
        {"name": "frozen for build", "initial": False, "signed_off": True,
         "description": "the accepted revision is the one the board is built with"},
    ],
    "transitions": [
        {"name": "submit for review", "from": "in design", "to": "awaiting review",
         "roles": ["designer", "admin"], "demands": _NO_DEMANDS},
        {"name": "send back", "from": "awaiting review", "to": "in design",
         "roles": ["designer", "reviewer", "admin"], "demands": _NO_DEMANDS},
        {"name": "accept margins", "from": "awaiting review", "to": "margins accepted",
         "roles": ["reviewer"], "demands": _FULL_DEMANDS},
        {"name": "freeze for build", "from": "margins accepted", "to": "frozen for build",
         "roles": ["manager"], "demands": _FULL_DEMANDS},
        {"name": "reopen", "from": "margins accepted", "to": "in design",
         "roles": ["designer", "reviewer", "manager", "admin"], "demands": _NO_DEMANDS},
        {"name": "reopen", "from": "frozen for build", "to": "in design",
         "roles": ["reviewer", "manager", "admin"], "demands": _NO_DEMANDS},
    ],
    "on_edit": "in design",
}
APPEND_ONLY = "audit entries are append-only: they cannot be changed or deleted"


def _create_audit_guard() -> None:
    if op.get_bind().dialect.name == 'postgresql':
        op.execute(f"""
            CREATE FUNCTION audit_entries_append_only() RETURNS trigger LANGUAGE plpgsql AS $$
            BEGIN
                RAISE EXCEPTION '{APPEND_ONLY}' USING ERRCODE = 'insufficient_privilege';
            END $$""")
        op.execute("CREATE TRIGGER audit_entries_no_change BEFORE UPDATE OR DELETE ON audit_entries "
                   "FOR EACH ROW EXECUTE FUNCTION audit_entries_append_only()")
        op.execute("CREATE TRIGGER audit_entries_no_truncate BEFORE TRUNCATE ON audit_entries "
                   "FOR EACH STATEMENT EXECUTE FUNCTION audit_entries_append_only()")
    else:
        for event in ('UPDATE', 'DELETE'):
            op.execute(f"CREATE TRIGGER audit_entries_no_{event.lower()} BEFORE {event} ON audit_entries "
                       f"BEGIN SELECT RAISE(ABORT, '{APPEND_ONLY}'); END")


def _drop_audit_guard() -> None:
    if op.get_bind().dialect.name == 'postgresql':
        op.execute("DROP TRIGGER IF EXISTS audit_entries_no_truncate ON audit_entries")
        op.execute("DROP TRIGGER IF EXISTS audit_entries_no_change ON audit_entries")
        op.execute("DROP FUNCTION IF EXISTS audit_entries_append_only()")
    else:
        op.execute("DROP TRIGGER IF EXISTS audit_entries_no_update")
        op.execute("DROP TRIGGER IF EXISTS audit_entries_no_delete")


def _seed_existing() -> None:
    """The default workflow for every team, the initial state for every rail."""
    conn = op.get_bind()
    now = datetime.now(timezone.utc)
    teams = sa.table('teams', sa.column('id', sa.Integer()))
    rails = sa.table('rails', sa.column('id', sa.Integer()), sa.column('head_n', sa.Integer()))
    workflows = sa.table('workflows', sa.column('team_id', sa.Integer()), sa.column('definition', JSON),
                         sa.column('version', sa.Integer()), sa.column('updated_at', sa.DateTime(timezone=True)),
                         sa.column('updated_by', sa.String()))
    rail_states = sa.table('rail_states', sa.column('rail_id', sa.Integer()), sa.column('state', sa.String()),
                           sa.column('revision_n', sa.Integer()), sa.column('since', sa.DateTime(timezone=True)),
                           sa.column('changed_by', sa.String()))
    team_ids = [row[0] for row in conn.execute(sa.select(teams.c.id))]
    if team_ids:
        op.bulk_insert(workflows, [{"team_id": t, "definition": DEFAULT_WORKFLOW, "version": 1, "updated_at": now,
                                    "updated_by": "migration 0003"} for t in team_ids])
    initial = next(s["name"] for s in DEFAULT_WORKFLOW["states"] if s["initial"])
    rows = [{"rail_id": r, "state": initial, "revision_n": n, "since": now, "changed_by": "migration 0003"}
            for r, n in conn.execute(sa.select(rails.c.id, rails.c.head_n))]
    if rows:
        op.bulk_insert(rail_states, rows)


def upgrade() -> None:
    op.create_table('login_throttles',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('key', sa.String(length=200), nullable=False),
    sa.Column('failures', sa.Integer(), nullable=False),
    sa.Column('last_failure_at', sa.DateTime(timezone=True), nullable=True),
    sa.Column('locked_until', sa.DateTime(timezone=True), nullable=True),
    sa.PrimaryKeyConstraint('id'),
    sa.UniqueConstraint('key')
    )
    op.create_table('workflows',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('team_id', sa.Integer(), nullable=False),
    sa.Column('definition', sa.JSON().with_variant(postgresql.JSONB(), 'postgresql'), nullable=False),
    sa.Column('version', sa.Integer(), nullable=False),
    sa.Column('updated_at', sa.DateTime(timezone=True), nullable=False),
    sa.Column('updated_by', sa.String(length=200), nullable=False),
    sa.ForeignKeyConstraint(['team_id'], ['teams.id'], ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('id'),
    sa.UniqueConstraint('team_id')
    )
    op.create_table('approvals',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('rail_id', sa.Integer(), nullable=False),
    sa.Column('revision_n', sa.Integer(), nullable=False),
    sa.Column('sha256', sa.String(length=64), nullable=False),
    sa.Column('reviewer_id', sa.Integer(), nullable=False),
    sa.Column('reviewer_name', sa.String(length=200), nullable=False),
    sa.Column('comment', sa.Text(), nullable=False),
    sa.Column('created_at', sa.DateTime(timezone=True), nullable=False),
    sa.Column('stale_at', sa.DateTime(timezone=True), nullable=True),
    sa.ForeignKeyConstraint(['rail_id'], ['rails.id'], ondelete='CASCADE'),
    sa.ForeignKeyConstraint(['reviewer_id'], ['users.id'], ),
    sa.PrimaryKeyConstraint('id'),
    sa.UniqueConstraint('rail_id', 'revision_n', 'reviewer_id')
    )
    with op.batch_alter_table('approvals', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_approvals_rail_id'), ['rail_id'], unique=False)

    op.create_table('rail_states',
    sa.Column('rail_id', sa.Integer(), nullable=False),
    sa.Column('state', sa.String(length=100), nullable=False),
    sa.Column('revision_n', sa.Integer(), nullable=False),
    sa.Column('since', sa.DateTime(timezone=True), nullable=False),
    sa.Column('changed_by', sa.String(length=200), nullable=False),
    sa.ForeignKeyConstraint(['rail_id'], ['rails.id'], ondelete='CASCADE'),
    sa.PrimaryKeyConstraint('rail_id')
    )
    op.create_table('waivers',
    sa.Column('id', sa.Integer(), nullable=False),
    sa.Column('rail_id', sa.Integer(), nullable=False),
    sa.Column('revision_n', sa.Integer(), nullable=False),
    sa.Column('sha256', sa.String(length=64), nullable=False),
    sa.Column('check_id', sa.String(length=100), nullable=False),
    sa.Column('check_title', sa.String(length=200), nullable=False),
    sa.Column('verdict', sa.String(length=10), nullable=False),
    sa.Column('reason', sa.Text(), nullable=False),
    sa.Column('reviewer_id', sa.Integer(), nullable=False),
    sa.Column('reviewer_name', sa.String(length=200), nullable=False),
    sa.Column('created_at', sa.DateTime(timezone=True), nullable=False),
    sa.Column('carried_from_id', sa.Integer(), nullable=True),
    sa.ForeignKeyConstraint(['carried_from_id'], ['waivers.id'], ondelete='SET NULL'),
    sa.ForeignKeyConstraint(['rail_id'], ['rails.id'], ondelete='CASCADE'),
    sa.ForeignKeyConstraint(['reviewer_id'], ['users.id'], ),
    sa.PrimaryKeyConstraint('id'),
    sa.UniqueConstraint('rail_id', 'revision_n', 'check_id')
    )
    with op.batch_alter_table('waivers', schema=None) as batch_op:
        batch_op.create_index(batch_op.f('ix_waivers_rail_id'), ['rail_id'], unique=False)

    _seed_existing()
    _create_audit_guard()


def downgrade() -> None:
    _drop_audit_guard()
    with op.batch_alter_table('waivers', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_waivers_rail_id'))

    op.drop_table('waivers')
    op.drop_table('rail_states')
    with op.batch_alter_table('approvals', schema=None) as batch_op:
        batch_op.drop_index(batch_op.f('ix_approvals_rail_id'))

    op.drop_table('approvals')
    op.drop_table('workflows')
    op.drop_table('login_throttles')
