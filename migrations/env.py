"""Alembic environment: the URL comes from the app's settings, never from alembic.ini.

``app.migrate`` passes its ``Settings`` (and optionally an open connection) through
``config.attributes``; the plain ``alembic`` command reads ``SPATLINE_*`` variables.
"""

from __future__ import annotations

from logging.config import fileConfig

from alembic import context
from sqlalchemy import Connection

import app.models  # noqa: F401  (registers every table on Base.metadata)
from app.db import Base, make_engine
from app.settings import Settings

config = context.config
if config.config_file_name is not None and config.attributes.get("configure_logger", True):
    fileConfig(config.config_file_name, disable_existing_loggers=False)

target_metadata = Base.metadata


def _settings() -> Settings:
    return config.attributes.get("settings") or Settings()


def _run(connection: Connection) -> None:
    is_sqlite = connection.dialect.name == "sqlite"
    context.configure(
        connection=connection,
        target_metadata=target_metadata,
        # SQLite cannot ALTER most things; batch mode rebuilds the table instead.
        render_as_batch=is_sqlite,
        compare_type=True,
    )
    with context.begin_transaction():
        context.run_migrations()


def run_migrations_offline() -> None:
    url = _settings().database_url
    context.configure(
        url=url,
        target_metadata=target_metadata,
        literal_binds=True,
        render_as_batch=url.startswith("sqlite"),
        dialect_opts={"paramstyle": "named"},
    )
    with context.begin_transaction():
        context.run_migrations()


def run_migrations_online() -> None:
    connection = config.attributes.get("connection")
    if connection is not None:
        _run(connection)
        return
    engine = make_engine(_settings())
    try:
        with engine.connect() as connection:
            if connection.dialect.name != "sqlite":
                _run(connection)
                return
            # A batch rebuild drops and re-creates tables; with foreign keys enforced that
            # would cascade or fail. The pragma only changes outside a transaction, so it
            # goes straight to the driver connection (which SQLAlchemy would wrap in BEGIN).
            raw = connection.connection.dbapi_connection
            raw.execute("PRAGMA foreign_keys=OFF")
            try:
                _run(connection)
                problems = raw.execute("PRAGMA foreign_key_check").fetchall()
                if problems:
                    raise RuntimeError(f"migration left broken foreign keys: {problems!r}")
            finally:
                raw.execute("PRAGMA foreign_keys=ON")
    finally:
        engine.dispose()


if context.is_offline_mode():
    run_migrations_offline()
else:
    run_migrations_online()
