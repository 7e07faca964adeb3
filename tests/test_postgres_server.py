"""The throwaway PostgreSQL server the suite starts when none answers at the test URL."""

from __future__ import annotations

import subprocess
from pathlib import Path

import pytest
from sqlalchemy import create_engine, text

from tests.postgres_server import ThrowawayPostgres, server_binaries

SETUP = Path(__file__).resolve().parent.parent / "scripts" / "test-setup"


def test_a_throwaway_server_serves_a_run_and_leaves_nothing_behind():
    binaries = server_binaries()
    assert binaries is not None, "scripts/test-setup installs Debian's postgresql where no server answers"
    server = ThrowawayPostgres(binaries)
    url = server.start()
    try:
        engine = create_engine(url)
        with engine.connect() as conn:
            assert conn.execute(text("SELECT current_database(), current_user")).one() == ("test", "postgres")
            assert conn.execute(text("SHOW listen_addresses")).scalar_one() == "127.0.0.1"
        engine.dispose()
    finally:
        server.stop()
    assert not server.folder.exists()
    refused = create_engine(url, connect_args={"connect_timeout": 2})
    with pytest.raises(Exception):
        refused.connect()


def test_the_setup_script_names_the_server_it_finds(tmp_path):
    """With everything installed it installs nothing and says whether PostgreSQL answers."""
    done = subprocess.run([str(SETUP)], capture_output=True, text=True, timeout=120,
                          env={"PATH": "/usr/local/bin:/usr/bin:/bin:/usr/sbin:/sbin",
                               "RAILSIGN_TEST_POSTGRES_URL": "postgresql+psycopg://postgres@127.0.0.1:1/none"})
    assert done.returncode == 0, done.stderr
    assert "installing" not in done.stdout
    assert "no PostgreSQL answers at 127.0.0.1:1" in done.stdout
