"""Schema migrations through Alembic: the only way the schema is made or changed."""

from __future__ import annotations

from alembic import command
from alembic.config import Config
from alembic.script import ScriptDirectory

from server.config import REPO_ROOT, Settings

__all__ = ["alembic_config", "upgrade", "downgrade", "head_revision"]

MIGRATIONS_DIR = REPO_ROOT / "migrations"


def alembic_config(settings: Settings) -> Config:
    if not (MIGRATIONS_DIR / "env.py").exists():
        raise RuntimeError(
            f"migrations not found at {MIGRATIONS_DIR}: install railsign from its checkout with `pip install -e .`"
        )
    cfg = Config()
    cfg.set_main_option("script_location", str(MIGRATIONS_DIR))
    cfg.attributes["settings"] = settings
    return cfg


def upgrade(settings: Settings, target: str = "head") -> None:
    command.upgrade(alembic_config(settings), target)


def downgrade(settings: Settings, target: str = "base") -> None:
    command.downgrade(alembic_config(settings), target)


def head_revision(settings: Settings) -> str | None:
    return ScriptDirectory.from_config(alembic_config(settings)).get_current_head()
