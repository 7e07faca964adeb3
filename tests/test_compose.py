"""docker-compose.yml describes the scale-out deployment consistently (no Docker engine runs here)."""

from __future__ import annotations

import shlex
from pathlib import Path

import yaml
from sqlalchemy.engine import make_url

from server.__main__ import build_parser

COMPOSE = Path(__file__).resolve().parent.parent / "docker-compose.yml"
APP_SERVICES = ("migrate", "web", "worker")


def _compose() -> dict:
    return yaml.safe_load(COMPOSE.read_text())


def test_services_are_the_four_of_the_deployment():
    services = _compose()["services"]
    assert set(services) == {"db", "migrate", "web", "worker"}
    assert services["web"]["deploy"]["replicas"] == 2


def test_every_app_service_points_at_the_db_service_with_its_credentials():
    compose = _compose()
    db_env = compose["services"]["db"]["environment"]
    for name in APP_SERVICES:
        env = compose["services"][name]["environment"]
        url = make_url(env["RAILSIGN_DATABASE_URL"])
        assert url.drivername == "postgresql+psycopg", name
        assert url.host == "db" and (url.port or 5432) == 5432, name
        assert url.username == db_env["POSTGRES_USER"], name
        assert url.password == db_env["POSTGRES_PASSWORD"], name
        assert url.database == db_env["POSTGRES_DB"], name
        assert "RAILSIGN_SECRET_KEY" in env, name
        # Separate worker processes do the analysis; web processes run no worker threads.
        assert env["RAILSIGN_WORKER_THREADS"] == "0", name


def test_commands_are_real_cli_commands():
    parser = build_parser()
    for name in APP_SERVICES:
        command = _compose()["services"][name]["command"]
        argv = command if isinstance(command, list) else shlex.split(command)
        assert argv[0] == "railsign", name
        parser.parse_args(argv[1:])  # raises SystemExit on an unknown command or option


def test_health_checks_and_start_order_are_consistent():
    services = _compose()["services"]
    for name in ("db", "web", "worker"):
        assert services[name]["healthcheck"]["test"], name
    assert "pg_isready" in " ".join(services["db"]["healthcheck"]["test"])
    web_cmd = services["web"]["command"]
    port = web_cmd[web_cmd.index("--port") + 1]
    assert f"127.0.0.1:{port}/healthz" in " ".join(services["web"]["healthcheck"]["test"])
    assert port in [str(p) for p in services["web"]["expose"]]
    assert services["migrate"]["depends_on"]["db"]["condition"] == "service_healthy"
    for name in ("web", "worker"):
        assert services[name]["depends_on"]["migrate"]["condition"] == "service_completed_successfully"


def test_database_has_a_named_volume():
    compose = _compose()
    volumes = compose["services"]["db"]["volumes"]
    named = volumes[0].split(":")[0]
    assert named in compose["volumes"]
    assert volumes[0].endswith(":/var/lib/postgresql/data")
