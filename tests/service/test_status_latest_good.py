"""The status's latest good reading per station: the latest reading when it is good, else
the one before it that is (the tank prediction and the fill-window's current value)."""

from __future__ import annotations

import datetime as dt

import pytest

from tests.service.test_status_api import DAY, DAY_END, DAY_START, _reading

pytestmark = pytest.mark.db


def test_a_failed_last_reading_leaves_the_prediction_on_the_good_one_before(
    client, viewer_headers, session, make_site, make_station, make_tank
):
    site = make_site(timezone="America/Los_Angeles")
    intake = make_station(site=site, role="intake")
    make_station(site=site, role="treated")  # no readings at all
    tank = make_tank(site=site, station=intake, culture_temperature_c=24.0)
    good_at = DAY_END - dt.timedelta(minutes=30)
    failed_at = DAY_END - dt.timedelta(minutes=15)
    session.add_all([
        _reading(intake.pk, DAY_START + dt.timedelta(hours=1)),
        _reading(intake.pk, good_at),
        _reading(intake.pk, failed_at, qc=4, ph=6.5),
    ])
    session.commit()
    body = client.get(f"/api/v1/sites/{site.id}/status", params={"date": DAY.isoformat()},
                      headers=viewer_headers).json()
    station = next(s for s in body["stations"] if s["station_id"] == intake.id)
    assert station["latest_reading"]["observed_at"].startswith("2026-06-11T06:45")
    [row] = [t for t in body["tanks"] if t["tank_id"] == tank.id]
    assert row["predicted"]["observed_at"].startswith("2026-06-11T06:30")
    [hint] = [h for h in body["fill_window"] if h["station_id"] == intake.id]
    assert hint["current_observed_at"].startswith("2026-06-11T06:30")

    # With the good reading last, it is the one used.
    session.add(_reading(intake.pk, DAY_END - dt.timedelta(minutes=5)))
    session.commit()
    body = client.get(f"/api/v1/sites/{site.id}/status", params={"date": DAY.isoformat()},
                      headers=viewer_headers).json()
    [row] = [t for t in body["tanks"] if t["tank_id"] == tank.id]
    assert row["predicted"]["observed_at"].startswith("2026-06-11T06:55")
