"""Run the Alembic migrations from code (the CLI's ``spatline migrate`` and the tests)."""

from __future__ import annotations

from pathlib import Path

from alembic import command
from alembic.config import Config

from app.settings import Settings

REPO_ROOT = Path(__file__).resolve().parent.parent
MIGRATIONS_DIR = REPO_ROOT / "migrations"


def alembic_config(settings: Settings) -> Config:
    ini = REPO_ROOT / "alembic.ini"
    config = Config(str(ini)) if ini.exists() else Config()
    config.set_main_option("script_location", str(MIGRATIONS_DIR))
    config.attributes["settings"] = settings
    # The caller's logging set-up (pytest's capture, the CLI's) stays as it is.
    config.attributes["configure_logger"] = False
    return config


def upgrade(settings: Settings, revision: str = "head") -> None:
    command.upgrade(alembic_config(settings), revision)


def downgrade(settings: Settings, revision: str = "base") -> None:
    command.downgrade(alembic_config(settings), revision)


def current_heads(settings: Settings) -> tuple[str, ...]:
    from alembic.script import ScriptDirectory

    return tuple(ScriptDirectory.from_config(alembic_config(settings)).get_heads())
