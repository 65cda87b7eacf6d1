"""The fill-window hint shows the latest value beside the week's medians, and says so when the
water now is far below them (the medians are history, not a forecast)."""

from __future__ import annotations

import datetime as dt

import numpy as np
import pytest

import chemistry
from app.status.service import FAR_BELOW_MEDIAN_FRACTION, current_against_medians

pytestmark = pytest.mark.db

STEP = dt.timedelta(minutes=30)


@pytest.fixture
def intake(make_site, make_station, make_tank, make_device):
    site = make_site(id="cove", timezone="UTC")
    station = make_station(site=site, id="intake", role="intake",
                           alkalinity={"mode": "fixed", "value": 2150.0})
    make_tank(site=site, station=station, id="larvae-1", culture_temperature_c=24.0)
    return make_device(station=station)[1]


def _post(client, device_key, phs):
    now = dt.datetime.now(dt.UTC).replace(second=0, microsecond=0)
    # Temperature and salinity wobble a little: a constant value would fail the flat-line test.
    readings = [
        {"observed_at": (now - STEP * (len(phs) - 1 - i)).isoformat(), "ph": ph,
         "ph_scale": "total", "temperature_c": 12.0 + _wobble(i, 0.01),
         "salinity": 31.0 + _wobble(i, 0.01)}
        for i, ph in enumerate(phs)
    ]
    answer = client.post("/api/v1/readings", json={"readings": readings},
                         headers={"Authorization": f"Bearer {device_key}"})
    assert answer.status_code == 200 and answer.json()["accepted"] == len(phs), answer.text


def _wobble(i: int, size: float) -> float:
    return size if i % 2 else -size


def _jitter(phs: list[float]) -> list[float]:
    return [round(ph + _wobble(i, 0.002), 4) for i, ph in enumerate(phs)]


def _omega_at_24(ph: float, i: int) -> float:
    """Omega at 24 degC of reading ``i`` (its own temperature and salinity)."""
    state = chemistry.solve(temperature=12.0 + _wobble(i, 0.01),
                            salinity=31.0 + _wobble(i, 0.01), ph=ph, alkalinity=2150.0,
                            ph_scale="total")
    return float(chemistry.at_temperature(state, 24.0).omega_aragonite)


def test_an_upwelling_under_way_is_called_out(client, viewer_headers, viewer_key, intake):
    # Three days of ordinary water (pH 8.05), a four-hour fall, then five hours of upwelled
    # water (7.55); a gentle ramp and a little jitter keep the QC spike, rate and flat-line
    # tests quiet, so every reading counts.
    ramp = list(np.linspace(8.05, 7.55, 9)[1:-1])
    phs = _jitter([8.05] * 144 + ramp + [7.55] * 10)
    _post(client, intake, phs)
    status = client.get("/api/v1/sites/cove/status", headers=viewer_headers).json()
    [hint] = status["fill_window"]
    assert hint["current_omega_aragonite"] == pytest.approx(
        _omega_at_24(phs[-1], len(phs) - 1), rel=1e-6)
    best = [hint["hourly_median"][h] for h in hint["best_hours"]]
    assert min(best) > 0.9 * _omega_at_24(8.05, 0)  # the week's history, not the water now
    assert hint["current_far_below"] is True
    assert "far below these medians" in hint["current_note"]
    assert "not a forecast" in hint["current_note"]
    assert hint["current_observed_at"].endswith("Z")
    client.post("/sign-in", data={"key": viewer_key}, follow_redirects=False)
    page = client.get("/sites/cove").text
    assert "data-fill-note" in page and "far below these medians" in page
    assert f"{hint['current_omega_aragonite']:.2f}" in page


def test_ordinary_water_gets_the_value_and_no_note(client, viewer_headers, intake):
    phs = _jitter([8.05] * 48)
    _post(client, intake, phs)
    [hint] = client.get("/api/v1/sites/cove/status", headers=viewer_headers).json()[
        "fill_window"]
    assert hint["current_omega_aragonite"] == pytest.approx(
        _omega_at_24(phs[-1], len(phs) - 1), rel=1e-6)
    assert hint["current_far_below"] is False and hint["current_note"] is None


def test_the_threshold_and_empty_series():
    times = np.array(["2026-06-01T00:00", "2026-06-01T01:00"], dtype="datetime64[us]")
    just_above = current_against_medians(
        times=times, omega=[3.0, FAR_BELOW_MEDIAN_FRACTION * 2.0 + 1e-9],
        best_medians=[2.0, 2.5])
    assert just_above["current_far_below"] is False
    below = current_against_medians(times=times, omega=[3.0, 1.0], best_medians=[2.0, None])
    assert below["current_far_below"] is True
    assert below["current_observed_at"] == dt.datetime(2026, 6, 1, 1, tzinfo=dt.UTC)
    nothing = current_against_medians(times=times[:0], omega=[], best_medians=[])
    assert nothing["current_omega_aragonite"] is None and nothing["current_note"] is None
