"""Migrations are the only way tables are made: from empty to head, down to base and up
again; the models and the migrations agree; SQLite runs with WAL, foreign keys and
write transactions that take the lock at their start."""

from __future__ import annotations

import datetime as dt

import pytest
from alembic.autogenerate import compare_metadata
from alembic.migration import MigrationContext
from sqlalchemy import inspect, text

from app import migrate
from app.db import Base, make_engine, read_only_engine
from app.models import Reading, Site, Station
from app.settings import Settings

ISSUE_3_TABLES = {"sites", "stations", "tanks", "devices", "api_keys", "readings"}


@pytest.fixture
def scratch_settings(tmp_path, settings):
    """A database of its own: SQLite in tmp, or the PostgreSQL test database itself."""
    if settings.database_url.startswith("postgresql"):
        return settings
    return settings.model_copy(update={"database_url": f"sqlite:///{tmp_path / 'm.db'}"})


def _tables(settings: Settings) -> set[str]:
    engine = make_engine(settings)
    try:
        return set(inspect(engine).get_table_names()) - {"alembic_version"}
    finally:
        engine.dispose()


@pytest.mark.db
def test_upgrade_downgrade_upgrade(scratch_settings, engine):
    migrate.upgrade(scratch_settings)
    assert _tables(scratch_settings) >= ISSUE_3_TABLES
    migrate.downgrade(scratch_settings, "base")
    assert _tables(scratch_settings) == set()
    migrate.upgrade(scratch_settings)
    assert _tables(scratch_settings) >= ISSUE_3_TABLES


@pytest.mark.db
def test_models_match_migrations(engine):
    """Autogenerate finds nothing to do: every model change came with its migration."""
    with engine.connect() as connection:
        context = MigrationContext.configure(connection, opts={"compare_type": True})
        differences = compare_metadata(context, Base.metadata)
    assert differences == []


def test_one_head(settings):
    assert len(migrate.current_heads(settings)) == 1


@pytest.mark.db
def test_readings_indexes_serve_station_time_ranges(engine):
    indexes = {tuple(ix["column_names"]) for ix in inspect(engine).get_indexes("readings")}
    uniques = {
        tuple(uq["column_names"]) for uq in inspect(engine).get_unique_constraints("readings")
    }
    assert ("station_pk", "observed_at") in indexes
    assert ("station_pk", "source", "observed_at") in uniques
    assert ("station_pk", "source", "reading_id") in uniques


def _sqlite_settings(tmp_path, settings, busy_timeout_s=15.0) -> Settings:
    return settings.model_copy(
        update={
            "database_url": f"sqlite:///{tmp_path / 'p.db'}",
            "sqlite_busy_timeout_s": busy_timeout_s,
        }
    )


def test_sqlite_pragmas(tmp_path, settings):
    sqlite_settings = _sqlite_settings(tmp_path, settings)
    migrate.upgrade(sqlite_settings)
    engine = make_engine(sqlite_settings)
    try:
        with engine.connect() as connection:
            assert connection.exec_driver_sql("PRAGMA journal_mode").scalar() == "wal"
            assert connection.exec_driver_sql("PRAGMA foreign_keys").scalar() == 1
            assert connection.exec_driver_sql("PRAGMA busy_timeout").scalar() == 15000
    finally:
        engine.dispose()


def test_sqlite_enforces_foreign_keys(tmp_path, settings):
    sqlite_settings = _sqlite_settings(tmp_path, settings)
    migrate.upgrade(sqlite_settings)
    engine = make_engine(sqlite_settings)
    try:
        with pytest.raises(Exception, match="FOREIGN KEY"), engine.begin() as connection:
            connection.execute(
                text(
                    "INSERT INTO stations (site_id, id, name, role, alkalinity, qc_limits, "
                    "created_at, updated_at) VALUES ('nowhere', 's', 'S', 'intake', '{}', '{}', "
                    "'2026-01-01 00:00:00', '2026-01-01 00:00:00')"
                )
            )
    finally:
        engine.dispose()


def test_sqlite_writers_take_the_lock_at_begin_and_readers_do_not(tmp_path, settings):
    sqlite_settings = _sqlite_settings(tmp_path, settings, busy_timeout_s=0.05)
    migrate.upgrade(sqlite_settings)
    engine = make_engine(sqlite_settings)
    try:
        with engine.connect() as writer:
            writer.begin()
            writer.execute(text("SELECT 1"))  # no write yet, but the lock is already held
            with pytest.raises(Exception, match="locked"), engine.connect() as second:
                second.begin()
                second.execute(text("SELECT 1"))
            # A reader starts a deferred transaction and reads past the writer (WAL).
            with read_only_engine(engine).connect() as reader:
                assert reader.execute(text("SELECT count(*) FROM sites")).scalar() == 0
            writer.rollback()
    finally:
        engine.dispose()


@pytest.mark.db
def test_times_come_back_aware_utc(session, make_site, make_station):
    station = make_station()
    local = dt.datetime(2026, 6, 1, 5, 0, tzinfo=dt.timezone(dt.timedelta(hours=-7)))
    session.add(Reading(station_pk=station.pk, source="import", observed_at=local))
    session.commit()
    session.expire_all()
    stored = session.query(Reading).filter_by(station_pk=station.pk).one()
    assert stored.observed_at == local
    assert stored.observed_at.utcoffset() == dt.timedelta(0)
    assert stored.observed_at.hour == 12
    assert session.get(Site, station.site_id).created_at.tzinfo is not None
    assert isinstance(session.get(Station, station.pk).created_at, dt.datetime)


@pytest.mark.db
def test_naive_times_are_refused(session, make_station):
    station = make_station()
    session.add(
        Reading(station_pk=station.pk, source="import", observed_at=dt.datetime(2026, 6, 1, 5))
    )
    with pytest.raises(Exception, match="no UTC offset"):
        session.flush()
    session.rollback()
