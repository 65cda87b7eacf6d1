"""Run the Alembic migrations from code (the CLI's ``spatline migrate`` and the tests)."""

from __future__ import annotations

from pathlib import Path

from alembic import command
from alembic.config import Config

import migrations
from app.settings import Settings

# The migrations are a package installed beside ``app`` (package data carries env.py, the
# revision template and versions/), so they are found from a wheel as well as a checkout.
MIGRATIONS_DIR = Path(migrations.__file__).resolve().parent
# alembic.ini only exists in a source checkout (for the plain `alembic` command); the
# installed service needs nothing from it, since env.py takes the URL from the settings.
SOURCE_ALEMBIC_INI = MIGRATIONS_DIR.parent / "alembic.ini"


def alembic_config(settings: Settings) -> Config:
    ini = SOURCE_ALEMBIC_INI
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
