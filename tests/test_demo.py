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


def test_outside_the_upwelling_and_the_late_pulse_intake_is_mostly_above_the_floor(
    week: simulator.DemoWeek,
) -> None:
    intake = week.stations[scenario.INTAKE_STATION_ID]
    disturbed = _in_window(intake, simulator.UPWELLING.whole(week.end)) | _in_window(
        intake, simulator.LATE_PULSE.whole(week.end)
    )
    above = intake.omega_aragonite[~disturbed] >= OMEGA_FLOOR
    assert above.mean() > 0.9


def _tank_omega(week: simulator.DemoWeek, tank: dict) -> np.ndarray:
    """Predicted omega aragonite of a demo tank: its source water, its treatment, closed
    heating to its culture temperature, computed here with the engine."""
    source = week.stations[tank["source_station_id"]]
    water = chemistry.solve(
        temperature=source.temperature_c,
        salinity=source.salinity,
        alkalinity=source.alkalinity,
        pco2=source.pco2_uatm,
    )
    treatment = tank.get("treatment")
    if treatment:
        water = chemistry.add_chemical(water, treatment["chemical"], treatment["dose_mg_per_l"])
    return np.asarray(
        chemistry.at_temperature(water, tank["culture_temperature_c"]).omega_aragonite
    )


def test_upwelling_passes_before_the_week_ends_and_a_milder_pulse_is_under_way(
    week: simulator.DemoWeek,
) -> None:
    """The demo's story: tanks go below the floor in the upwelling and recover above the
    default clear level (floor + 0.2) well before the end; on the last day only the
    most exposed tank is below its floor again."""
    from app.alerts.rules import DEFAULT_OMEGA_CLEAR_MARGIN

    intake = week.stations[scenario.INTAKE_STATION_ID]
    _, upwelling_stop = simulator.UPWELLING.whole(week.end)
    pulse_start, _ = simulator.LATE_PULSE.whole(week.end)
    assert timedelta(hours=24) <= pulse_start - upwelling_stop
    recovered = np.array([upwelling_stop <= t < pulse_start for t in intake.observed_at])
    last_hour = np.array([week.end - t < timedelta(hours=1) for t in intake.observed_at])
    core = _in_window(intake, simulator.UPWELLING.full_strength(week.end))
    below_at_end = []
    for tank in scenario.TANKS:
        omega = _tank_omega(week, tank)
        assert np.all(omega[recovered] > OMEGA_FLOOR + DEFAULT_OMEGA_CLEAR_MARGIN), tank["id"]
        if np.all(omega[last_hour] < OMEGA_FLOOR):
            below_at_end.append(tank["id"])
        if tank["source_station_id"] == scenario.INTAKE_STATION_ID:
            assert (omega[core] < OMEGA_FLOOR).sum() >= 12 * 12, tank["id"]
    assert below_at_end == ["nursery-1"]


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


def _check_the_demo_story_through_the_api(engine, viewer_key: str) -> None:
    """What a manager opening the demo sees: the upwelling's alerts raised and cleared in
    the notifications list, one tank below its floor now, samples that give an alkalinity
    line and pH offsets, and a batch that lived through the upwelling."""
    import httpx
    from anyio.from_thread import start_blocking_portal

    from app.main import create_app
    from app.settings import Settings
    from tests.conftest import BASE_URL, _PortalASGITransport

    site = scenario.SITE["id"]
    intake = scenario.INTAKE_STATION_ID
    viewer = {"Authorization": f"Bearer {viewer_key}"}
    settings = Settings(_env_file=None, run_worker_in_serve=False)
    app = create_app(settings, engine=engine)
    with (
        start_blocking_portal() as portal,
        httpx.Client(transport=_PortalASGITransport(app, portal), base_url=BASE_URL) as client,
    ):
        notifications = client.get(f"/api/v1/sites/{site}/notifications", headers=viewer)
        assert notifications.status_code == 200, notifications.text
        listed = notifications.json()
        listed = listed["items"] if isinstance(listed, dict) else listed
        text = repr(listed)
        for tank_id in ("larvae-3", "nursery-1"):
            name = next(t["name"] for t in scenario.TANKS if t["id"] == tank_id)
            assert f"ALERT: predicted omega aragonite in the tank, tank {name}" in text
            assert f"CLEARED: predicted omega aragonite in the tank, tank {name}" in text

        alerts = client.get(f"/api/v1/sites/{site}/alerts", params={"state": "open"},
                            headers=viewer).json()
        assert [a.get("tank_id") for a in alerts] == ["nursery-1"]

        samples = client.get(f"/api/v1/sites/{site}/stations/{intake}/lab-samples",
                             headers=viewer).json()
        assert sum(s["alkalinity_umol_kg"] is not None for s in samples) >= 5
        line = client.get(f"/api/v1/sites/{site}/stations/{intake}/alkalinity-line",
                          headers=viewer)
        assert line.status_code == 200, line.text
        # The samples scatter about the scenario's invented line: whatever salinity span
        # the week's samples cover, the fit agrees with that line inside the span.
        fit = line.json()
        assert fit["residual_sd"] < 3 * scenario.SAMPLE_ALKALINITY_SD_UMOL_KG
        middle = (fit["salinity_min"] + fit["salinity_max"]) / 2
        scenario_line = simulator.alkalinity_on_line(middle, scenario.INTAKE_ALKALINITY_LINE)
        assert abs(fit["slope"] * middle + fit["intercept"] - scenario_line) < 10.0
        check = client.get(f"/api/v1/sites/{site}/stations/{intake}/ph-check",
                           headers=viewer).json()
        offsets = [o["offset"] for o in check["offsets"] if o["offset"] is not None]
        assert len(offsets) >= 5
        # Sensor noise (0.01) and the lab's (0.004): offsets of a few hundredths at most.
        assert all(abs(offset) < 0.05 for offset in offsets)

        exposure = {
            batch["id"]: client.get(f"/api/v1/sites/{site}/batches/{batch['id']}/exposure",
                                    headers=viewer).json()
            for batch in scenario.BATCHES
        }
        early, late = (exposure[b["id"]] for b in scenario.BATCHES)
        assert early["run"]["hours_below_floor"] > 6.0
        assert early["run"]["deficit_omega_hours"] > 0.0
        assert late["run"]["hours_below_floor"] == 0.0


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
        assert all(address.endswith(".example") for address in scenario.ALERT_RECIPIENTS)
        _check_the_demo_story_through_the_api(engine, viewer_key)

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
        # Counts agree with their noun: "1 reading stored", "0 readings stored".
        assert not re.search(r"\b1 readings\b|\b(?!1\b)\d+ reading\b", first + second)
        assert re.search(rf"\b{READINGS_PER_WEEK} readings stored", first)
        with engine.connect() as connection:
            old_admin = connection.execute(
                select(ApiKey.revoked_at).where(ApiKey.key_hash == hash_key(admin_key))
            ).scalar_one()
        assert old_admin is not None
    finally:
        engine.dispose()


def test_demo_counts_agree_with_their_noun():
    from app.cli.demo import _count

    assert [_count(n, "reading") for n in (0, 1, 2)] == ["0 readings", "1 reading", "2 readings"]
