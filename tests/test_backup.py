"""railsign backup / restore on SQLite and PostgreSQL: a restored copy holds every row of every table."""

from __future__ import annotations


import pytest
from sqlalchemy import create_engine, select, text

from server.__main__ import EXIT_BAD_INPUT, main
from server.models import Base
from tests.conftest import TEST_SECRET, scratch_postgres_database
from tests.signoff_support import edit_rail, make_board, make_rail, store_checks, check


def _every_row(url: str) -> dict[str, list[tuple]]:
    engine = create_engine(url)
    try:
        with engine.connect() as conn:
            return {t.name: sorted(tuple(map(repr, row)) for row in conn.execute(select(t)))
                    for t in Base.metadata.sorted_tables}
    finally:
        engine.dispose()


@pytest.fixture
def signed_rail(client, people, session_factory) -> dict:
    """A rail with two revisions, an approval of the first and a waiver on the second, and their audit trail."""
    rail = make_rail(client, people, make_board(client, people))
    first = rail["head"]["sha256"]
    store_checks(session_factory, first, [check("startup_soa", "pass", 3.0)])
    approved = client.post(f"/api/v1/rails/{rail['id']}/approvals", json={"sha256": first, "comment": "ok"},
                           headers=people.headers("reviewer"))
    assert approved.status_code == 201, approved.text
    second = edit_rail(client, people, rail, "220 uF")["head"]["sha256"]
    store_checks(session_factory, second, [check("startup_soa", "marginal", 1.2)])
    waived = client.post(f"/api/v1/rails/{rail['id']}/waivers",
                         json={"sha256": second, "check_id": "startup_soa", "reason": "bench test at 70 °C"},
                         headers=people.headers("reviewer"))
    assert waived.status_code == 201, waived.text
    return rail


@pytest.fixture
def empty_copy_url(database_url, tmp_path, request):
    """Where the backup is restored: a new SQLite file, or a new PostgreSQL database."""
    if database_url.startswith("sqlite"):
        yield f"sqlite:///{tmp_path / 'restored.db'}"
        return
    with scratch_postgres_database(request.getfixturevalue("postgres_admin_url"), "railsign_restore") as url:
        yield url


def test_a_restored_copy_holds_every_revision_approval_waiver_and_audit_entry(
        signed_rail, database_url, empty_copy_url, tmp_path, monkeypatch, capsys):
    monkeypatch.setenv("RAILSIGN_SECRET_KEY", TEST_SECRET)
    before = _every_row(database_url)
    assert len(before["rail_revisions"]) == 2 and len(before["approvals"]) == 1 and len(before["waivers"]) == 1
    assert len(before["audit_entries"]) >= 5
    file = tmp_path / "railsign.backup"
    monkeypatch.setenv("RAILSIGN_DATABASE_URL", database_url)
    assert main(["backup", str(file)]) == 0
    monkeypatch.setenv("RAILSIGN_DATABASE_URL", empty_copy_url)
    assert main(["restore", str(file)]) == 0
    assert "restored" in capsys.readouterr().out
    assert _every_row(empty_copy_url) == before


def test_a_file_that_is_no_backup_or_of_the_other_engine_is_refused(database_url, tmp_path, monkeypatch, capsys):
    monkeypatch.setenv("RAILSIGN_SECRET_KEY", TEST_SECRET)
    monkeypatch.setenv("RAILSIGN_DATABASE_URL", database_url)
    junk = tmp_path / "notes.txt"
    junk.write_text("not a database")
    assert main(["restore", str(junk)]) == EXIT_BAD_INPUT
    assert "is not a railsign backup" in capsys.readouterr().err
    other = tmp_path / "other.backup"
    other.write_bytes(b"PGDMP" + b"\0" * 64 if database_url.startswith("sqlite") else b"SQLite format 3\x00" + b"\0" * 84)
    assert main(["restore", str(other)]) == EXIT_BAD_INPUT
    assert "the configured database is" in capsys.readouterr().err
