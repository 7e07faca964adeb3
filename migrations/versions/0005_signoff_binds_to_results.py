"""Approvals and waivers name the stored result they were given against; approvals keep why they went stale.

- approvals: engine_version, result_id (-> analysis_results), stale_reason; a reviewer approves a
  revision once per result (unique rail, revision, reviewer, result), so a revision read anew by a
  new engine can be approved again.
- waivers: engine_version, result_id; a check of a revision is waived once per result.
- audit_entries: an index on action (the rails moved by an engine change are listed from it).

Existing approvals and waivers keep empty engine_version and result_id: nobody recorded which
result they saw.

SQLite: the unique constraints change by rebuilding approvals and waivers (batch). Dropping the
old waivers table sets the self-reference carried_from_id of the copied rows to NULL (its ON
DELETE SET NULL fires with foreign keys on), so those links are read before and written back
after. The audit trail is not rebuilt (an index only), so its append-only triggers stay.

Downgrade: approvals and waivers that repeat (rail, revision, reviewer) or (rail, revision,
check) with another result cannot live under the old constraints; the later ones are deleted.

Revision ID: 0005
Revises: 0004
Create Date: 2026-12-09
"""

from __future__ import annotations

import sqlalchemy as sa
from alembic import op

revision = '0005'
down_revision = '0004'
branch_labels = None
depends_on = None

# Names the SQLite batch gives the unnamed unique constraints of migration 0003 when it reflects them.
_NAMING = {"uq": "uq_%(table_name)s_%(column_0_N_name)s"}
_OLD_UNIQUE = {"approvals": ["rail_id", "revision_n", "reviewer_id"], "waivers": ["rail_id", "revision_n", "check_id"]}
_NEW_UNIQUE = {"approvals": ("uq_approvals_reviewer_result", ["rail_id", "revision_n", "reviewer_id", "result_id"]),
               "waivers": ("uq_waivers_check_result", ["rail_id", "revision_n", "check_id", "result_id"])}


def _is_sqlite() -> bool:
    return op.get_bind().dialect.name == "sqlite"


def _unique_name(table: str, columns: list[str]) -> str:
    """The name of the unique constraint over ``columns`` (as reflected, or as the batch names it)."""
    for uq in sa.inspect(op.get_bind()).get_unique_constraints(table):
        if uq["column_names"] == columns and uq.get("name"):
            return uq["name"]
    return _convention_name(table, columns)


def _convention_name(table: str, columns: list[str]) -> str:
    return f"uq_{table}_{'_'.join(columns)}"


def _carried_links() -> list[tuple[int, int]]:
    waivers = sa.table('waivers', sa.column('id', sa.Integer), sa.column('carried_from_id', sa.Integer))
    return [tuple(r) for r in op.get_bind().execute(
        sa.select(waivers.c.id, waivers.c.carried_from_id).where(waivers.c.carried_from_id.is_not(None)))]


def _restore_links(links: list[tuple[int, int]]) -> None:
    waivers = sa.table('waivers', sa.column('id', sa.Integer), sa.column('carried_from_id', sa.Integer))
    for waiver_id, source_id in links:
        op.get_bind().execute(waivers.update().where(waivers.c.id == waiver_id).values(carried_from_id=source_id))


def _swap_unique(table: str, drop: tuple[str, list[str]], create: tuple[str, list[str]],
                 add: list[sa.Column] = (), remove: list[str] = ()) -> None:
    links = _carried_links() if table == "waivers" and _is_sqlite() else []
    with op.batch_alter_table(table, naming_convention=_NAMING) as batch_op:
        for column in add:
            batch_op.add_column(column)
        batch_op.drop_constraint(drop[0], type_='unique')
        for name in remove:
            batch_op.drop_column(name)
        batch_op.create_unique_constraint(create[0], create[1])
    _restore_links(links)


def upgrade() -> None:
    approvals_fk = sa.ForeignKey('analysis_results.id', name='fk_approvals_result_id', ondelete='SET NULL')
    waivers_fk = sa.ForeignKey('analysis_results.id', name='fk_waivers_result_id', ondelete='SET NULL')
    _swap_unique('approvals', (_unique_name('approvals', _OLD_UNIQUE['approvals']), _OLD_UNIQUE['approvals']),
                 _NEW_UNIQUE['approvals'],
                 add=[sa.Column('stale_reason', sa.Text(), nullable=False, server_default=sa.text("''")),
                      sa.Column('engine_version', sa.String(length=20), nullable=True),
                      sa.Column('result_id', sa.Integer(), approvals_fk, nullable=True)])
    _swap_unique('waivers', (_unique_name('waivers', _OLD_UNIQUE['waivers']), _OLD_UNIQUE['waivers']),
                 _NEW_UNIQUE['waivers'],
                 add=[sa.Column('engine_version', sa.String(length=20), nullable=True),
                      sa.Column('result_id', sa.Integer(), waivers_fk, nullable=True)])
    op.create_index('ix_audit_action', 'audit_entries', ['action'], unique=False)


def _delete_repeats(table: str, columns: list[str]) -> None:
    t = sa.table(table, sa.column('id', sa.Integer), *(sa.column(c) for c in columns))
    first = sa.select(sa.func.min(t.c.id)).group_by(*(t.c[c] for c in columns))
    op.get_bind().execute(t.delete().where(t.c.id.not_in(first)))


def downgrade() -> None:
    op.drop_index('ix_audit_action', table_name='audit_entries')
    for table in ('waivers', 'approvals'):
        _delete_repeats(table, _OLD_UNIQUE[table])
    for table, dropped in (('waivers', ['engine_version', 'result_id']),
                           ('approvals', ['stale_reason', 'engine_version', 'result_id'])):
        _swap_unique(table, _NEW_UNIQUE[table], (_convention_name(table, _OLD_UNIQUE[table]), _OLD_UNIQUE[table]),
                     remove=dropped)
