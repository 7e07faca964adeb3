"""Alembic environment: the URL comes from railsign's settings, or a connection is handed in."""

from __future__ import annotations

from alembic import context
from sqlalchemy import Connection

from server.config import Settings
from server.db import make_engine
from server.models import Base

config = context.config
target_metadata = Base.metadata


def _run(connection: Connection) -> None:
    context.configure(
        connection=connection,
        target_metadata=target_metadata,
        compare_type=True,
        render_as_batch=connection.dialect.name == "sqlite",
    )
    with context.begin_transaction():
        context.run_migrations()


def run_online() -> None:
    connection = config.attributes.get("connection")
    if connection is not None:
        _run(connection)
        return
    settings = config.attributes.get("settings") or Settings()
    engine = make_engine(settings)
    try:
        with engine.connect() as conn:
            _run(conn)
    finally:
        engine.dispose()


if context.is_offline_mode():
    raise SystemExit("offline migrations are not supported: run `railsign migrate` against a database")
run_online()
