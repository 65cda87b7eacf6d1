"""``spatline import``: a logger's CSV export through the same ingest as the API."""

from __future__ import annotations

import datetime as dt
from pathlib import Path
from zoneinfo import ZoneInfo

import numpy as np
import pytest
from sqlalchemy import func, select

from app.cli import main
from app.cli.importer import ImportOptions, ImportSetupError, import_csv
from app.db import make_sessionmaker
from app.readings.models import Reading
from chemistry import alkalinity_from_mg_per_l_caco3, solve
from tests.scratch import add_site_with_intake, migrated_engine

DEFAULT_COLUMNS = {
    "observed_at": "observed_at",
    "reading_id": "reading_id",
    "temperature_c": "temperature_c",
    "salinity": "salinity",
    "ph": "ph",
    "alkalinity": "alkalinity",
}

# Yesterday, so that every row lies in the past wherever the test runs.
DAY = (dt.datetime.now(dt.UTC) - dt.timedelta(days=1)).date().isoformat()

LOGGER_FILE = f"""observed_at,temperature_c,salinity,ph,alkalinity
{DAY} 06:00,11.8,31.2,7.71,108
{DAY} 06:05,11.9,31.2,7.72,
{DAY} 06:10,abc,31.2,7.72,
{DAY} 06:15,11.9,70,7.73,
,11.9,31.2,7.73,
{DAY} 06:25,12.0,31.1,7.74,
"""


def write(tmp_path: Path, text: str, name: str = "logger.csv") -> Path:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    return path


def options(**changes) -> ImportOptions:
    values = {
        "ph_scale": "nbs",
        "columns": dict(DEFAULT_COLUMNS),
        "timezone": "America/Vancouver",
        "alkalinity_unit": "mg_l_caco3",
    } | changes
    return ImportOptions(**values)


def count(session, station) -> int:
    return session.scalar(
        select(func.count()).select_from(Reading).where(Reading.station_pk == station.pk)
    )


@pytest.mark.db
class TestImportFunction:
    @pytest.fixture
    def station(self, make_station):
        return make_station(alkalinity={"mode": "fixed", "value": 2150.0})

    def test_good_rows_stored_bad_rows_reported_by_line(self, tmp_path, session, station):
        path = write(tmp_path, LOGGER_FILE)
        report = import_csv(
            session=session, station=station, path=path, options=options(), progress=False
        )
        assert (report.rows, report.accepted, report.duplicates) == (6, 3, 0)
        lines = [line for line, _ in report.errors]
        assert lines == [4, 5, 6]
        messages = dict(report.errors)
        assert "'abc' is not a number" in messages[4]
        assert "salinity must be a finite number from 0 to 50" in messages[5]
        assert "time '' does not match" in messages[6]

        rows = list(
            session.scalars(
                select(Reading)
                .where(Reading.station_pk == station.pk)
                .order_by(Reading.observed_at)
            )
        )
        # 06:00 in Vancouver is 13:00 UTC in summer (PDT, UTC-7) or 14:00 in winter (PST,
        # UTC-8); common knowledge.
        local = dt.datetime.fromisoformat(f"{DAY} 06:00").replace(
            tzinfo=ZoneInfo("America/Vancouver")
        )
        assert rows[0].observed_at == local
        assert (rows[0].observed_at.hour, rows[0].observed_at.minute) in ((13, 0), (14, 0))
        assert all(r.source == "import" for r in rows)
        assert rows[0].alkalinity_source == "reading"
        expected_alkalinity = float(alkalinity_from_mg_per_l_caco3(108.0, 11.8, 31.2))
        assert rows[0].alkalinity_used_umol_kg == pytest.approx(expected_alkalinity, rel=1e-12)
        assert [r.alkalinity_source for r in rows[1:]] == ["fixed", "fixed"]
        expected = solve(
            temperature=np.array([11.8, 11.9, 12.0]),
            salinity=np.array([31.2, 31.2, 31.1]),
            ph=np.array([7.71, 7.72, 7.74]),
            alkalinity=np.array([expected_alkalinity, 2150.0, 2150.0]),
            ph_scale="nbs",
        )
        np.testing.assert_allclose([r.omega_aragonite for r in rows], expected.omega_aragonite)

    def test_importing_again_stores_nothing_twice(self, tmp_path, session, station):
        path = write(tmp_path, LOGGER_FILE)
        import_csv(session=session, station=station, path=path, options=options(), progress=False)
        again = import_csv(
            session=session, station=station, path=path, options=options(), progress=False
        )
        assert (again.accepted, again.duplicates) == (0, 3)
        assert count(session, station) == 3

    def test_small_batches_give_the_same_result(self, tmp_path, session, station):
        path = write(tmp_path, LOGGER_FILE)
        report = import_csv(
            session=session,
            station=station,
            path=path,
            options=options(batch_size=1),
            progress=False,
        )
        assert (report.accepted, [line for line, _ in report.errors]) == (3, [4, 5, 6])

    def test_column_mapping_time_format_and_delimiter(self, tmp_path, session, station):
        day = dt.date.fromisoformat(DAY)
        text = (
            "Zeit;Temp;pH-Wert;Nummer\n"
            f"{day:%d/%m/%Y} 06:00:00+0000;11.8;7.71;n-1\n"
            f"{day:%d/%m/%Y} 06:05:00+0000;11.9;7.72;n-2\n"
        )
        path = write(tmp_path, text)
        columns = dict(DEFAULT_COLUMNS) | {
            "observed_at": "Zeit",
            "temperature_c": "Temp",
            "ph": "pH-Wert",
            "reading_id": "Nummer",
        }
        report = import_csv(
            session=session,
            station=station,
            path=path,
            options=options(
                columns=columns, delimiter=";", time_format="%d/%m/%Y %H:%M:%S%z", timezone=None
            ),
            explicit_columns={"observed_at", "temperature_c", "ph", "reading_id"},
            progress=False,
        )
        assert report.accepted == 2 and report.errors == []
        rows = list(session.scalars(select(Reading).where(Reading.station_pk == station.pk)))
        assert sorted(r.reading_id for r in rows) == ["n-1", "n-2"]
        assert all(r.salinity is None and r.qc_salinity == 9 for r in rows)
        assert all(r.observed_at.hour == 6 for r in rows)

    def test_an_impossible_date_is_called_invalid_not_a_format_mismatch(
        self, tmp_path, session, station
    ):
        text = (
            "observed_at,temperature_c,salinity,ph\n"
            "31/11/2025 08:25,11.8,31.2,7.71\n"  # November has 30 days
            "2025-11-30 08:25,11.8,31.2,7.71\n"  # not the --time-format at all
        )
        report = import_csv(
            session=session,
            station=station,
            path=write(tmp_path, text),
            options=options(time_format="%d/%m/%Y %H:%M"),
            progress=False,
        )
        messages = dict(report.errors)
        assert messages[2].startswith("time '31/11/2025 08:25' is not a valid date or time")
        assert "does not match" not in messages[2]
        assert "time '2025-11-30 08:25' does not match %d/%m/%Y %H:%M" in messages[3]

    def test_naive_times_without_a_zone_are_rejected_per_row(self, tmp_path, session, station):
        path = write(tmp_path, LOGGER_FILE)
        report = import_csv(
            session=session,
            station=station,
            path=path,
            options=options(timezone=None),
            progress=False,
        )
        assert report.accepted == 0
        assert "has no UTC offset; give --timezone" in report.errors[0][1]

    def test_unusable_options_stop_before_importing(self, tmp_path, session, station):
        path = write(tmp_path, LOGGER_FILE)
        with pytest.raises(ImportSetupError, match=r"no column 'Temp'.*'observed_at'"):
            import_csv(
                session=session,
                station=station,
                path=path,
                options=options(columns=dict(DEFAULT_COLUMNS) | {"temperature_c": "Temp"}),
                explicit_columns={"temperature_c"},
                progress=False,
            )
        with pytest.raises(ImportSetupError, match="--timezone"):
            import_csv(
                session=session,
                station=station,
                path=path,
                options=options(timezone="Mars/Olympus"),
                progress=False,
            )
        assert count(session, station) == 0


def test_command_line_end_to_end(tmp_path, monkeypatch, capsys):
    """The real command on its own SQLite database (migrated like production)."""
    url = f"sqlite:///{tmp_path / 'cli.db'}"
    monkeypatch.setenv("SPATLINE_DATABASE_URL", url)
    monkeypatch.setenv("SPATLINE_ENVIRONMENT", "development")
    _settings, engine = migrated_engine(url)
    try:
        with make_sessionmaker(engine)() as session:
            add_site_with_intake(session)
            session.commit()
        path = write(tmp_path, LOGGER_FILE)
        argv = [
            "import",
            str(path),
            "--station",
            "cove/intake",
            "--ph-scale",
            "nbs",
            "--timezone",
            "America/Vancouver",
            "--alkalinity-unit",
            "mg_l_caco3",
            "--quiet",
        ]
        assert main(argv) == 1  # some rows were rejected
        output = capsys.readouterr()
        assert "6 rows: 3 stored, 0 already stored, 3 rejected." in output.out
        assert f"{path}:4: column 'temperature_c': 'abc' is not a number" in output.err

        assert main(argv) == 1
        assert "6 rows: 0 stored, 3 already stored, 3 rejected." in capsys.readouterr().out
        with engine.connect() as connection:
            assert connection.scalar(select(func.count()).select_from(Reading)) == 3

        assert main([*argv[:3], "cove/nowhere", *argv[4:]]) == 2
        assert "no station 'nowhere'" in capsys.readouterr().err
    finally:
        engine.dispose()
