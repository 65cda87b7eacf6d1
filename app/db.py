"""Engine, SQLite pragmas, declarative ``Base`` and the per-request session dependency.

Nothing here connects at import time: ``make_engine(settings)`` builds an engine that
connects lazily, and ``create_app`` keeps it (and its session factories) on ``app.state``.
"""

from __future__ import annotations

import datetime as dt
from collections.abc import Iterator
from pathlib import Path
from typing import Annotated, Any

from fastapi import Depends, Request
from sqlalchemy import DateTime, Engine, MetaData, create_engine, event
from sqlalchemy.engine import make_url
from sqlalchemy.orm import DeclarativeBase, Session, sessionmaker
from sqlalchemy.types import TypeDecorator

from app.settings import Settings

# Named constraints keep Alembic batch mode (SQLite table rebuilds) and downgrades exact.
NAMING_CONVENTION = {
    "ix": "ix_%(table_name)s_%(column_0_N_name)s",
    "uq": "uq_%(table_name)s_%(column_0_N_name)s",
    "ck": "ck_%(table_name)s_%(constraint_name)s",
    "fk": "fk_%(table_name)s_%(column_0_name)s_%(referred_table_name)s",
    "pk": "pk_%(table_name)s",
}

# Execution option read by the SQLite "begin" hook: how a transaction starts.
SQLITE_BEGIN_OPTION = "spatline_sqlite_begin"

# HTTP methods that only read; their sessions start SQLite transactions without the write lock.
READ_ONLY_METHODS = frozenset({"GET", "HEAD", "OPTIONS"})


class Base(DeclarativeBase):
    metadata = MetaData(naming_convention=NAMING_CONVENTION)


def utcnow() -> dt.datetime:
    return dt.datetime.now(dt.UTC)


class UtcDateTime(TypeDecorator[dt.datetime]):
    """A timezone-aware datetime stored in UTC on every backend.

    SQLite keeps no offset, so values are written as naive UTC and given ``UTC`` back on
    the way out; naive input is refused rather than guessed.
    """

    impl = DateTime(timezone=True)
    cache_ok = True

    def process_bind_param(self, value: dt.datetime | None, dialect: Any) -> dt.datetime | None:
        if value is None:
            return None
        if value.tzinfo is None or value.utcoffset() is None:
            raise ValueError(f"datetime {value.isoformat()} has no UTC offset; store aware times")
        value = value.astimezone(dt.UTC)
        if dialect.name == "sqlite":
            return value.replace(tzinfo=None)
        return value

    def process_result_value(self, value: dt.datetime | None, dialect: Any) -> dt.datetime | None:
        if value is None:
            return None
        if value.tzinfo is None:
            return value.replace(tzinfo=dt.UTC)
        return value.astimezone(dt.UTC)


def _configure_sqlite(engine: Engine, busy_timeout_s: float) -> None:
    busy_timeout_ms = int(busy_timeout_s * 1000)

    @event.listens_for(engine, "connect")
    def _on_connect(dbapi_connection: Any, _record: Any) -> None:
        # Take transaction control away from the sqlite3 module so that the "begin" hook
        # below decides how each transaction starts (and pragmas run outside one).
        dbapi_connection.isolation_level = None
        cursor = dbapi_connection.cursor()
        try:
            cursor.execute("PRAGMA journal_mode=WAL")
            cursor.execute("PRAGMA foreign_keys=ON")
            cursor.execute(f"PRAGMA busy_timeout={busy_timeout_ms}")
            cursor.execute("PRAGMA synchronous=NORMAL")
        finally:
            cursor.close()

    @event.listens_for(engine, "begin")
    def _on_begin(connection: Any) -> None:
        # IMMEDIATE takes the write lock at the start, so a writer waits (busy_timeout)
        # instead of failing when it upgrades a read snapshot that went stale. Readers ask
        # for DEFERRED and never block writers in WAL mode.
        mode = connection.get_execution_options().get(SQLITE_BEGIN_OPTION, "IMMEDIATE")
        connection.exec_driver_sql(f"BEGIN {mode}")


def make_engine(settings: Settings) -> Engine:
    """Build the engine for ``settings.database_url`` (no connection is opened here)."""
    url = make_url(settings.database_url)
    if url.get_backend_name() == "sqlite":
        if url.database and url.database != ":memory:":
            Path(url.database).expanduser().parent.mkdir(parents=True, exist_ok=True)
        engine = create_engine(
            url,
            connect_args={"check_same_thread": False, "timeout": settings.sqlite_busy_timeout_s},
        )
        _configure_sqlite(engine, settings.sqlite_busy_timeout_s)
        return engine
    if url.get_backend_name() == "postgresql" and url.get_driver_name() in ("", "psycopg2"):
        # psycopg 3 is the only PostgreSQL driver installed.
        url = url.set(drivername="postgresql+psycopg")
    return create_engine(url, pool_pre_ping=True)


def read_only_engine(engine: Engine) -> Engine:
    """The same engine (same pool) whose SQLite transactions start without the write lock."""
    if engine.dialect.name != "sqlite":
        return engine
    return engine.execution_options(**{SQLITE_BEGIN_OPTION: "DEFERRED"})


def make_sessionmaker(engine: Engine) -> sessionmaker[Session]:
    return sessionmaker(bind=engine, expire_on_commit=False, autoflush=False)


def get_session(request: Request) -> Iterator[Session]:
    """One session per request; GET requests read without taking SQLite's write lock."""
    state = request.app.state
    factory = state.read_sessionmaker if request.method in READ_ONLY_METHODS else state.sessionmaker
    with factory() as session:
        yield session


SessionDep = Annotated[Session, Depends(get_session)]
