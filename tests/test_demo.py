"""The demo hatchery: the simulator (pure) and `spatline demo` into a scratch SQLite database.

The demo's numbers are invented (demo/scenario.py); these tests check that the
simulated week has the shape the demo promises and that its values agree with the
chemistry engine, not that they match any real water.
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from itertools import pairwise
from zoneinfo import ZoneInfo

import numpy as np
import pytest

import chemistry
from demo import scenario, simulator

FIXED_END = datetime(2026, 6, 8, 17, 0, tzinfo=UTC)
READINGS_PER_WEEK = 7 * 24 * 12
# The floor the service alerts on by default (Ekstrom et al. 2015; Waldbusser et al. 2015).
OMEGA_FLOOR = 1.5


@pytest.fixture(scope="module")
def week() -> simulator.DemoWeek:
    return simulator.simulate_week(end=FIXED_END, seed=7)


def _in_window(series: simulator.StationSeries, window: tuple[datetime, datetime]) -> np.ndarray:
    start, stop = window
    return np.array([start <= t <= stop for t in series.observed_at])


def _derived_from_readings(series: simulator.StationSeries, line: dict[str, float]):
    """What the service will derive: reported NBS pH plus alkalinity from the station's line."""
    readings = series.readings()
    salinity = np.array([r["salinity"] for r in readings])
    return chemistry.solve(
        temperature=np.array([r["temperature_c"] for r in readings]),
        salinity=salinity,
        ph=np.array([r["ph"] for r in readings]),
        ph_scale="nbs",
        alkalinity=simulator.alkalinity_on_line(salinity, line),
    )


def test_same_seed_and_end_give_the_same_readings(week: simulator.DemoWeek) -> None:
    again = simulator.simulate_week(end=FIXED_END, seed=7)
    for station_id, series in week.stations.items():
        assert again.stations[station_id].readings() == series.readings()


def test_another_seed_gives_other_readings(week: simulator.DemoWeek) -> None:
    other = simulator.simulate_week(end=FIXED_END, seed=8)
    intake = scenario.INTAKE_STATION_ID
    assert other.stations[intake].readings() != week.stations[intake].readings()


def test_week_of_five_minute_readings_ends_at_the_last_mark_before_now() -> None:
    before = datetime.now(UTC)
    week = simulator.simulate_week(seed=1)
    zone = ZoneInfo(scenario.SITE["timezone"])
    assert set(week.stations) == {scenario.INTAKE_STATION_ID, scenario.TREATED_STATION_ID}
    for series in week.stations.values():
        times = series.observed_at
        assert len(times) == READINGS_PER_WEEK
        steps = {later - earlier for earlier, later in pairwise(times)}
        assert steps == {timedelta(minutes=5)}
        assert timedelta(0) <= before - times[-1] < timedelta(minutes=5)
        assert times[-1] - times[0] == timedelta(days=7) - timedelta(minutes=5)
        assert all(t.utcoffset() == t.astimezone(zone).utcoffset() for t in times)
        assert all(t.tzinfo is not None for t in times)


def test_reading_dicts_have_the_api_item_shape(week: simulator.DemoWeek) -> None:
    reading = week.stations[scenario.INTAKE_STATION_ID].readings()[0]
    assert set(reading) == {"observed_at", "temperature_c", "salinity", "ph", "ph_scale"}
    assert reading["ph_scale"] == "nbs"
    assert reading["observed_at"].utcoffset() is not None


def test_upwelling_brings_intake_saturation_well_below_the_floor(
    week: simulator.DemoWeek,
) -> None:
    intake = week.stations[scenario.INTAKE_STATION_ID]
    core = _in_window(intake, simulator.UPWELLING.full_strength(week.end))
    assert core.sum() >= 24 * 12  # at least a full day at full strength
    assert np.all(intake.omega_aragonite[core] < OMEGA_FLOOR)
    assert np.all(intake.pco2_uatm[core] > 900.0)
    derived = _derived_from_readings(intake, scenario.INTAKE_ALKALINITY_LINE)
    assert np.all(np.asarray(derived.omega_aragonite)[core] < OMEGA_FLOOR)


def test_outside_the_upwelling_intake_is_mostly_above_the_floor(
    week: simulator.DemoWeek,
) -> None:
    intake = week.stations[scenario.INTAKE_STATION_ID]
    upwelling = _in_window(intake, simulator.UPWELLING.whole(week.end))
    above = intake.omega_aragonite[~upwelling] >= OMEGA_FLOOR
    assert above.mean() > 0.9


def test_upwelling_water_is_colder(week: simulator.DemoWeek) -> None:
    intake = week.stations[scenario.INTAKE_STATION_ID]
    core = _in_window(intake, simulator.UPWELLING.full_strength(week.end))
    quiet = ~_in_window(intake, simulator.UPWELLING.whole(week.end)) & ~_in_window(
        intake, simulator.RAIN.whole(week.end)
    )
    cooling = intake.temperature_c[quiet].mean() - intake.temperature_c[core].mean()
    assert 3.0 < cooling < 4.5


def test_rain_day_freshens_the_intake(week: simulator.DemoWeek) -> None:
    intake = week.stations[scenario.INTAKE_STATION_ID]
    rain = _in_window(intake, simulator.RAIN.full_strength(week.end))
    quiet = ~_in_window(intake, simulator.UPWELLING.whole(week.end)) & ~_in_window(
        intake, simulator.RAIN.whole(week.end)
    )
    assert rain.sum() >= 12 * 12
    assert intake.salinity[quiet].mean() - intake.salinity[rain].mean() > 4.0


def test_day_night_cycle_in_temperature_and_co2(week: simulator.DemoWeek) -> None:
    intake = week.stations[scenario.INTAKE_STATION_ID]
    quiet = ~_in_window(intake, simulator.UPWELLING.whole(week.end)) & ~_in_window(
        intake, simulator.RAIN.whole(week.end)
    )
    hours = np.array([t.hour for t in intake.observed_at])
    afternoon = quiet & (hours >= 14) & (hours < 17)
    dawn = quiet & (hours >= 4) & (hours < 7)
    assert intake.temperature_c[afternoon].mean() > intake.temperature_c[dawn].mean() + 0.5
    assert intake.pco2_uatm[dawn].mean() > intake.pco2_uatm[afternoon].mean() + 50.0


def test_reported_ph_is_the_chemistry_of_the_simulated_water(week: simulator.DemoWeek) -> None:
    intake = week.stations[scenario.INTAKE_STATION_ID]
    derived = _derived_from_readings(intake, scenario.INTAKE_ALKALINITY_LINE)
    # Sensor noise of 0.01 in pH is about 2.5 % in pCO2; the median error stays small.
    relative = np.asarray(derived.pco2) / intake.pco2_uatm - 1.0
    assert abs(np.median(relative)) < 0.01
    assert np.percentile(np.abs(relative), 95) < 0.08


def test_header_water_is_warm_and_dosed_and_its_station_line_matches(
    week: simulator.DemoWeek,
) -> None:
    intake = week.stations[scenario.INTAKE_STATION_ID]
    header = week.stations[scenario.TREATED_STATION_ID]
    assert abs(header.temperature_c.mean() - scenario.HEADER_TEMPERATURE_C) < 0.2
    # Soda ash, Na2CO3: two moles of alkalinity per mole; 10 mg/L is about 184 umol/kg
    # (105.99 g/mol, density about 1.02 kg/L).
    assert 175.0 < week.header_alkalinity_added < 195.0
    assert np.all(header.omega_aragonite > intake.omega_aragonite)
    stations = scenario.station_definitions(header_alkalinity_added=week.header_alkalinity_added)
    header_line = next(s for s in stations if s["id"] == scenario.TREATED_STATION_ID)["alkalinity"]
    line_alkalinity = simulator.alkalinity_on_line(header.salinity, header_line)
    # Only the salinity sensor's noise (0.03 x 48 umol/kg) separates the line from the water.
    assert np.percentile(np.abs(line_alkalinity - header.alkalinity), 95) < 5.0


def test_cli_default_seed_is_the_simulator_default() -> None:
    from app.cli import demo as demo_command

    assert demo_command.DEFAULT_SEED == simulator.DEFAULT_SEED


def _count(engine, table) -> int:
    from sqlalchemy import func, select

    with engine.connect() as connection:
        return connection.scalar(select(func.count()).select_from(table))


@pytest.mark.db
def test_spatline_demo_loads_the_hatchery_once_into_a_scratch_sqlite_database(
    tmp_path, monkeypatch: pytest.MonkeyPatch, capsys: pytest.CaptureFixture[str]
) -> None:
    """Runs the real command (migrations included) on its own SQLite file, twice."""
    import re

    from sqlalchemy import select

    from app.alerts.models import AlertRule
    from app.auth.keys import hash_key
    from app.auth.models import ApiKey
    from app.cli import main
    from app.db import make_engine
    from app.readings.models import Reading
    from app.settings import Settings
    from app.sites.models import Device, Site, Station, Tank

    monkeypatch.setenv("SPATLINE_DATABASE_URL", f"sqlite:///{tmp_path / 'demo.db'}")
    monkeypatch.setenv("SPATLINE_ENVIRONMENT", "development")
    monkeypatch.delenv("SPATLINE_SECRET_KEY", raising=False)
    started = datetime.now(UTC)

    assert main(["demo"]) == 0
    first = capsys.readouterr().out
    admin_key = re.search(r"admin key \(configure\): (\S+)", first).group(1)
    viewer_key = re.search(r"viewer key \(read\): +(\S+)", first).group(1)
    assert "http://127.0.0.1:8000/docs" in first

    engine = make_engine(Settings(_env_file=None))
    try:
        assert _count(engine, Site) == 1
        assert _count(engine, Station) == 2
        assert _count(engine, Tank) == len(scenario.TANKS) == 4
        assert _count(engine, Device) == 2
        assert _count(engine, Reading) == 2 * READINGS_PER_WEEK
        with engine.connect() as connection:
            derived = connection.scalars(select(Reading.omega_aragonite)).all()
            stored_keys = {
                row.key_hash: row for row in connection.execute(select(ApiKey)).all()
            }
        # Every simulated reading is physical: the ingest derived chemistry for all of them.
        assert all(value is not None for value in derived)
        assert stored_keys[hash_key(admin_key)].role == "admin"
        assert stored_keys[hash_key(viewer_key)].role == "viewer"
        with engine.connect() as connection:
            recipients = connection.scalars(select(AlertRule.recipients)).all()
        assert recipients  # every tank got its default rules
        assert all(value == scenario.ALERT_RECIPIENTS for value in recipients)

        assert main(["demo"]) == 0
        second = capsys.readouterr().out
        assert "already exists" in second
        assert _count(engine, Site) == 1
        assert _count(engine, Station) == 2
        assert _count(engine, Tank) == 4
        assert _count(engine, Device) == 2
        # Only readings newer than the first run's last one may be added.
        elapsed_steps = (datetime.now(UTC) - started) // timedelta(minutes=5) + 1
        added = _count(engine, Reading) - 2 * READINGS_PER_WEEK
        assert 0 <= added <= 2 * elapsed_steps
        with engine.connect() as connection:
            old_admin = connection.execute(
                select(ApiKey.revoked_at).where(ApiKey.key_hash == hash_key(admin_key))
            ).scalar_one()
        assert old_admin is not None
    finally:
        engine.dispose()
