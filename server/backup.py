"""Backups of the whole database to one file, and their restore.

SQLite: SQLite's online backup API, page by page, consistent while the service runs; the
backup is itself a SQLite database file. PostgreSQL: ``pg_dump --format=custom`` and
``pg_restore --clean --if-exists --no-owner`` from Debian's postgresql-client, whose version
must be at least the server's. Either way the file holds every table: rails and their
revisions, results, approvals, waivers and the audit trail.

A restore replaces the configured database's contents with the file's; stop the service (web
processes and workers) first. A file of one engine is refused by the other.
"""

from __future__ import annotations

import shutil
import sqlite3
import subprocess
from pathlib import Path

from sqlalchemy.engine import make_url

from server.config import Settings

__all__ = ["BackupError", "backup", "restore", "kind_of_file"]

SQLITE_MAGIC = b"SQLite format 3\x00"
PG_DUMP_MAGIC = b"PGDMP"
PG_TIMEOUT_S = 3600


class BackupError(Exception):
    """A backup or restore that cannot be done, in words."""


def kind_of_file(path: Path) -> str | None:
    """'sqlite' or 'postgresql' by the file's first bytes; None for anything else."""
    with path.open("rb") as f:
        head = f.read(16)
    return "sqlite" if head == SQLITE_MAGIC else "postgresql" if head.startswith(PG_DUMP_MAGIC) else None


def _sqlite_path(settings: Settings) -> str:
    database = make_url(settings.database_url).database
    if not database or database == ":memory:":
        raise BackupError("an in-memory SQLite database has nothing to back up or restore")
    return database


def _libpq_url(settings: Settings) -> str:
    """The URL as pg_dump and pg_restore read it (without SQLAlchemy's driver name)."""
    return make_url(settings.database_url).set(drivername="postgresql").render_as_string(hide_password=False)


def _client(name: str) -> str:
    found = shutil.which(name)
    if found is None:
        raise BackupError(f"{name} is not installed: sudo apt-get install -y postgresql-client")
    return found


def _run(args: list[str]) -> None:
    done = subprocess.run(args, capture_output=True, text=True, timeout=PG_TIMEOUT_S)
    if done.returncode != 0:
        raise BackupError(f"{Path(args[0]).name} failed: {done.stderr.strip().splitlines()[-1] if done.stderr else ''}")


def backup(settings: Settings, target: Path) -> None:
    """Write the whole database to ``target`` (replaced if it exists)."""
    target = Path(target)
    if settings.is_sqlite:
        source = sqlite3.connect(_sqlite_path(settings))
        partial = target.with_name(target.name + ".partial")
        partial.unlink(missing_ok=True)
        copy = sqlite3.connect(partial)
        try:
            source.backup(copy)
        finally:
            copy.close()
            source.close()
        partial.replace(target)
        return
    _run([_client("pg_dump"), "--format=custom", "--no-owner", f"--file={target}", _libpq_url(settings)])


def restore(settings: Settings, source: Path) -> None:
    """Replace the configured database's contents with those of the backup file ``source``."""
    source = Path(source)
    if not source.is_file():
        raise BackupError(f"no backup file {source}")
    kind, engine = kind_of_file(source), ("sqlite" if settings.is_sqlite else "postgresql")
    if kind is None:
        raise BackupError(f"{source} is not a railsign backup (neither a SQLite database nor a pg_dump archive)")
    if kind != engine:
        raise BackupError(f"{source} is a {kind} backup; the configured database is {engine}")
    if settings.is_sqlite:
        backup_db = sqlite3.connect(f"file:{source}?mode=ro", uri=True)
        target = sqlite3.connect(_sqlite_path(settings))
        try:
            backup_db.backup(target)
        finally:
            target.close()
            backup_db.close()
        return
    _run([_client("pg_restore"), "--clean", "--if-exists", "--no-owner", "--single-transaction",
          f"--dbname={_libpq_url(settings)}", str(source)])
