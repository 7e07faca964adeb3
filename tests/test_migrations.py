"""Migrations on SQLite and PostgreSQL: empty to head and back to base, models and migrations agree,
existing teams and rails are carried into the sign-off tables, and the audit guard exists."""

from __future__ import annotations

from collections.abc import Iterator

import pytest
from alembic.autogenerate import compare_metadata
from alembic.runtime.migration import MigrationContext
from sqlalchemy import column, create_engine, func, inspect, select, table, text
from sqlalchemy.exc import DBAPIError

from server import migrate
from server.models import Base, utcnow
from server.workflow import parse_workflow
from tests.conftest import BACKENDS, make_settings, scratch_postgres_database

SIGNOFF_TABLES = {"workflows", "rail_states", "approvals", "waivers", "login_throttles", "signoff_rules",
                  "review_assignments"}


@pytest.fixture(params=BACKENDS)
def empty_url(request, tmp_path) -> Iterator[str]:
    """A database with no tables at all, on each backend."""
    if request.param == "sqlite":
        yield f"sqlite:///{tmp_path / 'empty.db'}"
        return
    with scratch_postgres_database(request.getfixturevalue("postgres_admin_url"), "railsign_migrations") as url:
        yield url


def _tables(url: str) -> set[str]:
    engine = create_engine(url)
    try:
        return set(inspect(engine).get_table_names())
    finally:
        engine.dispose()


def test_upgrade_from_empty_to_head_and_back_to_base(empty_url):
    settings = make_settings(empty_url)
    migrate.upgrade(settings)
    tables = _tables(empty_url)
    assert SIGNOFF_TABLES | {"audit_entries", "rails", "users"} <= tables
    migrate.downgrade(settings, "0002")
    assert not (SIGNOFF_TABLES & _tables(empty_url)) and "audit_entries" in _tables(empty_url)
    migrate.downgrade(settings, "base")
    assert _tables(empty_url) <= {"alembic_version"}
    migrate.upgrade(settings)  # and up once more from nothing
    assert SIGNOFF_TABLES <= _tables(empty_url)


def test_models_and_migrations_agree(database_url):
    """What `alembic check` does: autogenerate against the migrated schema finds nothing to add."""
    engine = create_engine(database_url)
    try:
        with engine.connect() as conn:
            diff = compare_metadata(MigrationContext.configure(conn, opts={"compare_type": True}), Base.metadata)
    finally:
        engine.dispose()
    assert diff == []


def test_teams_and_rails_that_exist_get_a_workflow_and_a_state(empty_url):
    settings = make_settings(empty_url)
    migrate.upgrade(settings, "0002")
    engine = create_engine(empty_url)
    t = Base.metadata.tables
    with engine.begin() as conn:
        team = conn.execute(t["teams"].insert().values(name="legacy")).inserted_primary_key[0]
        product = conn.execute(t["products"].insert().values(team_id=team, name="Old product",
                                                             description="")).inserted_primary_key[0]
        board = conn.execute(t["boards"].insert().values(product_id=product, name="Main", revision="C",
                                                         description="")).inserted_primary_key[0]
        # The rails table as migration 0002 made it (the models have more columns by now).
        rails_0002 = table("rails", *(column(c) for c in ("id", "board_id", "name", "mode", "head_n", "head_sha256",
                                                          "created_at", "updated_at")))
        rail = conn.execute(rails_0002.insert().values(board_id=board, name="VBUS", mode="hard", head_n=4,
                                                       head_sha256="a" * 64, created_at=utcnow(),
                                                       updated_at=utcnow()).returning(rails_0002.c.id)).scalar_one()
        conn.execute(t["audit_entries"].insert().values(action="create", object_type="team", object_id=team,
                                                        user_name="old", request_id="", object_repr="legacy"))
    migrate.upgrade(settings)
    with engine.connect() as conn:
        workflow = conn.execute(select(t["workflows"]).where(t["workflows"].c.team_id == team)).one()
        state = conn.execute(select(t["rail_states"]).where(t["rail_states"].c.rail_id == rail)).one()
        assert parse_workflow(workflow.definition).initial == "in design"
        assert (state.state, state.revision_n) == ("in design", 4)
        with pytest.raises(DBAPIError, match="append-only"):
            conn.execute(text("UPDATE audit_entries SET user_name = 'someone else'"))
    for statement in ["DELETE FROM audit_entries"] + (["TRUNCATE audit_entries"] if "postgresql" in empty_url else []):
        with engine.connect() as conn:
            with pytest.raises(DBAPIError, match="append-only"):
                conn.execute(text(statement))
    migrate.downgrade(settings, "0002")  # with data in the tables
    with engine.connect() as conn:
        conn.execute(text("DELETE FROM audit_entries"))  # the guard went with 0003
        conn.commit()
    engine.dispose()


def test_rails_get_the_summary_of_their_head_revision(empty_url):
    from server.schemas.rail import normalize
    from server.schemas.validation import parse_rail_document
    from tests.factories import rail_doc

    settings = make_settings(empty_url)
    migrate.upgrade(settings, "0003")
    engine = create_engine(empty_url)
    t = Base.metadata.tables
    old_doc = normalize(parse_rail_document(rail_doc(load={"c_nom": "470 uF"})))
    head_doc = normalize(parse_rail_document(rail_doc(load={"c_nom": "1 mF"})))
    with engine.begin() as conn:
        team = conn.execute(t["teams"].insert().values(name="legacy")).inserted_primary_key[0]
        product = conn.execute(t["products"].insert().values(team_id=team, name="P", description="")) \
            .inserted_primary_key[0]
        board = conn.execute(t["boards"].insert().values(product_id=product, name="Main", revision="A",
                                                         description="")).inserted_primary_key[0]
        rails_0003 = table("rails", *(column(c) for c in ("id", "board_id", "name", "mode", "head_n", "head_sha256",
                                                          "created_at", "updated_at")))
        rail = conn.execute(rails_0003.insert().values(board_id=board, name="VOUT_12V", mode="current_limit",
                                                       head_n=2, head_sha256="b" * 64, created_at=utcnow(),
                                                       updated_at=utcnow()).returning(rails_0003.c.id)).scalar_one()
        for n, doc in ((1, old_doc), (2, head_doc)):
            conn.execute(t["rail_revisions"].insert().values(rail_id=rail, n=n, document=doc, sha256=str(n) * 64,
                                                             author_name="old", message=""))
        conn.execute(t["rail_states"].insert().values(rail_id=rail, state="in design", revision_n=2, since=utcnow(),
                                                      changed_by="old"))
    migrate.upgrade(settings)
    with engine.connect() as conn:
        summary = conn.execute(select(t["rails"].c.summary).where(t["rails"].c.id == rail)).scalar_one()
    assert summary == {"v_nom": 12.0, "c_nom": 1e-3, "load_model": "resistive", "fet": "Test N30 5m"}
    with engine.connect() as conn:  # nothing that refers to the rail went with the new column
        assert conn.execute(select(func.count()).select_from(t["rail_revisions"])).scalar_one() == 2
        assert conn.execute(select(func.count()).select_from(t["rail_states"])).scalar_one() == 1
    migrate.downgrade(settings, "0003")
    assert "summary" not in {c["name"] for c in inspect(engine).get_columns("rails")}
    engine.dispose()


def test_approvals_and_waivers_made_before_0005_keep_their_rows_and_links(empty_url):
    """0005 adds the result an approval or waiver was given against: empty on existing rows; on SQLite
    the waivers table is rebuilt, and the link of a carried waiver to its source must survive that."""
    settings = make_settings(empty_url)
    migrate.upgrade(settings, "0004")
    engine = create_engine(empty_url)
    t = Base.metadata.tables
    waivers_0004 = table("waivers", *(column(c) for c in (
        "id", "rail_id", "revision_n", "sha256", "check_id", "check_title", "verdict", "reason", "reviewer_id",
        "reviewer_name", "created_at", "carried_from_id")))
    approvals_0004 = table("approvals", *(column(c) for c in (
        "id", "rail_id", "revision_n", "sha256", "reviewer_id", "reviewer_name", "comment", "created_at")))
    with engine.begin() as conn:
        team = conn.execute(t["teams"].insert().values(name="legacy")).inserted_primary_key[0]
        users_0004 = table("users", *(column(c) for c in ("id", "username", "display_name", "role", "active",
                                                            "created_at")))
        conn.execute(users_0004.insert().values(username="old-reviewer", display_name="", role="reviewer",
                                                active=True, created_at=utcnow()))
        user = conn.execute(select(users_0004.c.id).where(users_0004.c.username == "old-reviewer")).scalar_one()
        product = conn.execute(t["products"].insert().values(team_id=team, name="P", description="")) \
            .inserted_primary_key[0]
        board = conn.execute(t["boards"].insert().values(product_id=product, name="Main", revision="A",
                                                         description="")).inserted_primary_key[0]
        rails_0004 = table("rails", *(column(c) for c in ("id", "board_id", "name", "mode", "head_n", "head_sha256",
                                                          "created_at", "updated_at")))
        rail = conn.execute(rails_0004.insert().values(
            board_id=board, name="VBUS", mode="hard", head_n=2, head_sha256="b" * 64, created_at=utcnow(),
            updated_at=utcnow()).returning(rails_0004.c.id)).scalar_one()
        row = {"rail_id": rail, "check_id": "startup_soa", "check_title": "Start-up SOA", "verdict": "marginal",
               "reason": "bench capture", "reviewer_id": user, "reviewer_name": "old-reviewer", "created_at": utcnow()}
        source = conn.execute(waivers_0004.insert().values(revision_n=1, sha256="a" * 64, carried_from_id=None,
                                                           **row).returning(waivers_0004.c.id)).scalar_one()
        carried = conn.execute(waivers_0004.insert().values(revision_n=2, sha256="b" * 64, carried_from_id=source,
                                                            **row).returning(waivers_0004.c.id)).scalar_one()
        conn.execute(t["audit_entries"].insert().values(action="waive", object_type="rail", object_id=rail,
                                                        user_name="old-reviewer", request_id="", object_repr="VBUS"))
        approval = conn.execute(approvals_0004.insert().values(
            rail_id=rail, revision_n=2, sha256="b" * 64, reviewer_id=user, reviewer_name="old-reviewer",
            comment="fine", created_at=utcnow()).returning(approvals_0004.c.id)).scalar_one()
    migrate.upgrade(settings)
    with engine.connect() as conn:
        waivers = conn.execute(select(t["waivers"].c.id, t["waivers"].c.carried_from_id, t["waivers"].c.engine_version,
                                      t["waivers"].c.result_id).order_by(t["waivers"].c.id)).all()
        approvals = conn.execute(select(t["approvals"].c.id, t["approvals"].c.engine_version,
                                        t["approvals"].c.result_id, t["approvals"].c.stale_reason)).all()
    assert [tuple(w) for w in waivers] == [(source, None, None, None), (carried, source, None, None)]
    assert [tuple(a) for a in approvals] == [(approval, None, None, "")]
    with engine.begin() as conn:  # once per result now: the same reviewer approves revision 2 as another result read it
        result = conn.execute(t["analysis_results"].insert().values(
            sha256="b" * 64, engine_version="2.0.0", options_key="k", options={}, verdict="pass", result={},
            duration_s=0.0, created_at=utcnow())).inserted_primary_key[0]
        conn.execute(t["approvals"].insert().values(rail_id=rail, revision_n=2, sha256="b" * 64, reviewer_id=user,
                                                    reviewer_name="old-reviewer", comment="read again",
                                                    created_at=utcnow(), engine_version="2.0.0", result_id=result))
    with engine.connect() as conn, pytest.raises(DBAPIError):
        conn.execute(t["approvals"].insert().values(rail_id=rail, revision_n=2, sha256="b" * 64, reviewer_id=user,
                                                    reviewer_name="old-reviewer", comment="twice",
                                                    created_at=utcnow(), engine_version="2.0.0", result_id=result))
    migrate.downgrade(settings, "0004")   # the repeated approval cannot live under the old constraint
    with engine.connect() as conn:
        assert conn.execute(select(approvals_0004.c.id)).scalars().all() == [approval]
        assert [tuple(r) for r in conn.execute(select(waivers_0004.c.id, waivers_0004.c.carried_from_id)
                                               .order_by(waivers_0004.c.id))] == [(source, None), (carried, source)]
        with pytest.raises(DBAPIError, match="append-only"):  # the audit guard outlived both rebuilds
            conn.execute(text("UPDATE audit_entries SET user_name = 'someone else'"))
    engine.dispose()
