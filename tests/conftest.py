"""Test fixtures: the same tests run on SQLite and on PostgreSQL over a real connection.

PostgreSQL: a database of its own per test process is created on the server named by
RAILSIGN_TEST_POSTGRES_URL (default: the machine's server, database ``test``), migrated
once, and emptied between tests. When no server answers there, a throwaway one from Debian's
postgresql package serves the run (tests/postgres_server.py); without that package the
PostgreSQL half fails with the command that installs it, never skipped. SQLite: a migrated template file is copied per test.

Two test processes (pytest-xdist, ``-n auto --maxprocesses 2`` in pyproject.toml) share a run of the
whole suite. Each has its own PostgreSQL database (named after its worker, gw0 or gw1), its own
temporary folder (so its own SQLite files) and takes free ports for the servers it starts. Tests
that share a module-scoped fixture (one served app and browser, one computed reading) run in one
process, their module's group. Named test paths, ``-s`` and ``--pdb`` run in one process, as does
``-n 0``.
"""

from __future__ import annotations

import os
import shutil
import uuid
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path

import pytest
from fastapi.testclient import TestClient
from sqlalchemy import create_engine, text
from sqlalchemy.engine import make_url

from server import migrate
from server.app import create_app
from server.config import Settings
from server.db import make_engine
from server.models import Base
from server.services.access import Actor
from server.services import users as user_service
from tests.postgres_server import HOW_TO_INSTALL, ThrowawayPostgres, server_binaries

POSTGRES_URL = os.environ.get("RAILSIGN_TEST_POSTGRES_URL", "postgresql+psycopg://postgres@127.0.0.1:5432/test")
TEST_SECRET = "test-secret-" + "x" * 32
BACKENDS = ["sqlite", "postgres"]


@pytest.hookimpl(tryfirst=True)  # before xdist's own, which starts the workers
def pytest_cmdline_main(config):
    """Two processes for the whole suite (no test paths named: the README's line, ``-m slow``). One
    process when files or folders are named (starting two processes costs more than such a run
    gains), with ``-s`` (what a test prints must reach the terminal: the stress suite prints its
    figures) and with ``--pdb``. An explicit ``-n`` wins over all of these."""
    explicit = any(a.startswith(("-n", "--numprocesses")) for a in config.invocation_params.args)
    named_paths = config.args_source is pytest.Config.ArgsSource.ARGS
    if not explicit and (named_paths or config.getoption("capture") == "no" or config.getoption("usepdb")):
        config.option.numprocesses = 0


def pytest_configure(config):
    """With two test processes, each keeps numpy's BLAS to one thread: two processes with a thread
    per core each would overbook the cores (set before xdist starts its workers, which inherit it)."""
    if getattr(config.option, "numprocesses", 0) and not os.environ.get("PYTEST_XDIST_WORKER"):
        for name in ("OPENBLAS_NUM_THREADS", "OMP_NUM_THREADS"):
            os.environ.setdefault(name, "1")


@pytest.hookimpl(tryfirst=True)  # before xdist reads the groups
def pytest_collection_modifyitems(config, items):
    """Tests that share a module-scoped fixture stay in one process (``--dist loadgroup``): the
    fixture is made once, and the module's tests see its state in their order."""
    for item in items:
        info = getattr(item, "_fixtureinfo", None)
        if info is None:
            continue
        if any(defs[-1].scope in ("module", "package") for defs in info.name2fixturedefs.values() if defs):
            item.add_marker(pytest.mark.xdist_group(item.nodeid.split("::", 1)[0]))


def worker_name() -> str:
    """This test process's xdist worker (gw0, gw1, ...), or "main" when the run has one process."""
    return os.environ.get("PYTEST_XDIST_WORKER", "main")


def make_settings(url: str, **extra) -> Settings:
    extra.setdefault("login_slowdown_s", 0.0)  # tests of the slowdown inject their own value and clock
    return Settings(**{"database_url": url, "secret_key": TEST_SECRET, "worker_threads": 0, **extra})


def _answers(url: str) -> Exception | None:
    engine = create_engine(url, connect_args={"connect_timeout": 5})
    try:
        with engine.connect():
            return None
    except Exception as exc:
        return exc
    finally:
        engine.dispose()


@pytest.fixture(scope="session")
def postgres_admin_url() -> Iterator[str]:
    """A PostgreSQL server's URL with rights to create databases: the configured one, or a throwaway
    server for this run when none answers there."""
    problem = _answers(POSTGRES_URL)
    if problem is None:
        yield POSTGRES_URL
        return
    binaries = server_binaries()
    if binaries is None:  # the suite needs PostgreSQL: fail loudly, never skip
        pytest.fail(f"PostgreSQL at {make_url(POSTGRES_URL).render_as_string(hide_password=True)} is needed for "
                    f"the postgres half of the suite and cannot be reached ({problem}); no local server package to "
                    f"start one for the run either: {HOW_TO_INSTALL}")
    server = ThrowawayPostgres(binaries)
    try:
        yield server.start()
    finally:
        server.stop()


@contextmanager
def scratch_postgres_database(admin_url: str, prefix: str) -> Iterator[str]:
    """An empty database (no tables) on the server of ``admin_url``, dropped afterwards."""
    admin = create_engine(make_url(admin_url), isolation_level="AUTOCOMMIT")
    name = f"{prefix}_{uuid.uuid4().hex[:10]}"
    with admin.connect() as conn:
        conn.execute(text(f'CREATE DATABASE "{name}"'))
    try:
        yield make_url(admin_url).set(database=name).render_as_string(hide_password=False)
    finally:
        with admin.connect() as conn:
            conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
        admin.dispose()


@pytest.fixture(scope="session")
def postgres_database(postgres_admin_url) -> Iterator[str]:
    """A fresh, migrated PostgreSQL database for this test process (each xdist worker has its own,
    named after it); dropped at the end."""
    admin_url = make_url(postgres_admin_url)
    name = f"railsign_test_{worker_name()}_{uuid.uuid4().hex[:10]}"
    admin = create_engine(admin_url, isolation_level="AUTOCOMMIT")
    with admin.connect() as conn:
        conn.execute(text(f'CREATE DATABASE "{name}"'))
    url = admin_url.set(database=name).render_as_string(hide_password=False)
    migrate.upgrade(make_settings(url))
    yield url
    with admin.connect() as conn:
        conn.execute(text(f'DROP DATABASE IF EXISTS "{name}" WITH (FORCE)'))
    admin.dispose()


@pytest.fixture(scope="session")
def sqlite_template(tmp_path_factory) -> Path:
    path = tmp_path_factory.mktemp("template") / "railsign.db"
    settings = make_settings(f"sqlite:///{path}")
    migrate.upgrade(settings)
    engine = make_engine(settings)
    with engine.connect() as conn:
        conn.exec_driver_sql("PRAGMA wal_checkpoint(TRUNCATE)")
    engine.dispose()
    return path


def _empty_postgres(url: str) -> None:
    engine = create_engine(url)
    with engine.begin() as conn:  # DELETE is much faster than TRUNCATE on small tables
        # The audit trail refuses DELETE (migration 0003); its owner lifts that for this transaction only.
        # So do the archived reports (migration 0010).
        guarded = ("audit_entries", "archived_reports")
        for name in guarded:
            conn.execute(text(f"ALTER TABLE {name} DISABLE TRIGGER USER"))
        for table in reversed(Base.metadata.sorted_tables):
            conn.execute(table.delete())
        for name in guarded:
            conn.execute(text(f"ALTER TABLE {name} ENABLE TRIGGER USER"))
    engine.dispose()


@pytest.fixture(params=BACKENDS)
def database_url(request, tmp_path) -> str:
    """A migrated, empty database on each backend."""
    if request.param == "sqlite":
        path = tmp_path / "railsign.db"
        shutil.copy(request.getfixturevalue("sqlite_template"), path)
        return f"sqlite:///{path}"
    url = request.getfixturevalue("postgres_database")
    _empty_postgres(url)
    return url


@pytest.fixture
def settings(database_url) -> Settings:
    return make_settings(database_url)


@pytest.fixture
def app(settings):
    app = create_app(settings)
    yield app
    app.state.engine.dispose()  # also for tests that never start the app's lifespan


@pytest.fixture
def session_factory(app):
    return app.state.sessionmaker


@pytest.fixture
def client(app) -> Iterator[TestClient]:
    with TestClient(app) as c:
        yield c


class People:
    """Users of every role in team 'alpha', one designer in team 'beta', each with an API token.

    Passwords (Argon2, about 0.1 s each) are set only where a test logs in with one.
    """

    ROLES = ["viewer", "designer", "reviewer", "manager", "admin"]

    def __init__(self, session_factory, *, passwords: bool = False) -> None:
        self.passwords = passwords
        self.tokens: dict[str, str] = {}
        self.ids: dict[str, int] = {}
        with session_factory() as session:
            system = Actor.system("test-setup")
            for role in self.ROLES:
                self._add(session, system, role, role, ["alpha"])
            self._add(session, system, "reviewer2", "reviewer", ["alpha"])
            self._add(session, system, "outsider", "designer", ["beta"])
            self.team_ids = {t.name: t.id for t in
                             user_service.get_user_by_name(session=session, username="admin").teams}
            self.team_ids["beta"] = user_service.get_user_by_name(session=session,
                                                                  username="outsider").teams[0].id

    def _add(self, session, system, name, role, teams) -> None:
        user = user_service.create_user(session=session, actor=system, username=name, role=role,
                                        password=f"{name}-password" if self.passwords else None, teams=teams)
        _, clear = user_service.create_token(session=session, actor=system, username=name, name="tests")
        self.tokens[name] = clear
        self.ids[name] = user.id

    def headers(self, name: str) -> dict[str, str]:
        return {"Authorization": f"Bearer {self.tokens[name]}"}


@pytest.fixture
def people(session_factory) -> People:
    return People(session_factory)
