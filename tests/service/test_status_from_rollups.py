"""The status's station figures read from the rollups equal their definitions applied to
the readings themselves (worked out here from the stored times and values, not from the
rollups): a regression check of the rollup path, for readings on whole minutes (occupied
minutes stand for the times), for readings with seconds (the path that reads the times),
and for today, whose last quarter is cut by the clock.
"""

from __future__ import annotations

import datetime as dt
import math

import numpy as np
import pytest

from app.readings.models import Reading
from app.status.service import site_status
from tests.stored import stored_reading

pytestmark = pytest.mark.db

DAY = dt.date(2026, 5, 20)
ZONE = "Australia/Adelaide"  # a half-hour zone (UTC+9:30 in May): the day starts at :30 UTC
DAY_START = dt.datetime(2026, 5, 19, 14, 30, tzinfo=dt.UTC)
DAY_END = DAY_START + dt.timedelta(days=1)


def _times(offset_seconds: int) -> list[dt.datetime]:
    """Irregular sampling over the day and the week before it: 5-minute steps with an
    outage, a stretch at 3 minutes, and a burst of 1-minute readings."""
    out = []
    t = DAY_START - dt.timedelta(days=3)
    while t < DAY_END + dt.timedelta(hours=2):
        out.append(t + dt.timedelta(seconds=offset_seconds))
        if DAY_START + dt.timedelta(hours=4) <= t < DAY_START + dt.timedelta(hours=5):
            t += dt.timedelta(minutes=1)
        elif DAY_START + dt.timedelta(hours=9) <= t < DAY_START + dt.timedelta(hours=12):
            t += dt.timedelta(minutes=3)
        elif DAY_START + dt.timedelta(hours=14) <= t < DAY_START + dt.timedelta(hours=16):
            t += dt.timedelta(minutes=120)  # an outage
        else:
            t += dt.timedelta(minutes=5)
    return out


def _expected(readings: list[Reading], start, end) -> dict:
    """The station figures by their definitions, from the stored readings."""
    times = np.array(sorted({r.observed_at.timestamp() for r in readings if r.observed_at < end
                             and r.observed_at >= end - dt.timedelta(days=7)}))
    interval = float(np.median(np.diff(times)))  # median positive spacing of distinct times
    in_day = [r for r in readings if start <= r.observed_at < end]
    slots = {math.floor((r.observed_at.timestamp() - start.timestamp()) / interval)
             for r in in_day}
    usable = [r.ph_total for r in in_day if r.qc_overall != 4]
    return {
        "interval_minutes": interval / 60.0,
        "completeness": 100.0 * len(slots) / math.ceil((end - start).total_seconds() / interval),
        "readings": len(in_day),
        "ph_min": min(usable), "ph_max": max(usable), "ph_mean": sum(usable) / len(usable),
        "fail": sum(r.qc_overall == 4 for r in in_day),
    }


@pytest.mark.parametrize("offset_seconds", [0, 17])
def test_station_figures_equal_their_definitions(session, make_site, make_station,
                                                 offset_seconds):
    site = make_site(timezone=ZONE)
    station = make_station(site=site)
    readings = [
        stored_reading(station, t, ph=7.8 + 0.1 * math.sin(i / 50.0),
                       qc_overall=4 if i % 97 == 0 else 1)
        for i, t in enumerate(_times(offset_seconds))
    ]
    session.add_all(readings)
    session.commit()
    status = site_status(session=session, site=site, day=DAY, now=DAY_END + dt.timedelta(days=1))
    [figures] = status["stations"]
    expected = _expected(readings, DAY_START, DAY_END)
    assert figures["expected_interval_minutes"] == pytest.approx(expected["interval_minutes"])
    assert figures["completeness_percent"] == pytest.approx(expected["completeness"])
    assert figures["readings"] == expected["readings"]
    assert figures["qc_counts"]["fail"] == expected["fail"] > 0
    ph = figures["day"]["ph_total"]
    assert (ph["min"], ph["max"]) == (expected["ph_min"], expected["ph_max"])
    assert ph["mean"] == pytest.approx(expected["ph_mean"], rel=1e-12)


def test_today_counts_up_to_now(session, make_site, make_station):
    site = make_site(timezone=ZONE)
    station = make_station(site=site)
    readings = [stored_reading(station, t, ph=7.9) for t in _times(0)]
    session.add_all(readings)
    session.commit()
    # Seven and a half minutes into a quarter hour, in the middle of the day.
    now = DAY_START + dt.timedelta(hours=6, minutes=7, seconds=30)
    status = site_status(session=session, site=site, day=None, now=now)
    [figures] = status["stations"]
    expected = _expected(readings, DAY_START, now)
    assert status["date"] == DAY and status["day_complete"] is False
    assert figures["readings"] == expected["readings"]
    assert figures["expected_interval_minutes"] == pytest.approx(expected["interval_minutes"])
    assert figures["completeness_percent"] == pytest.approx(expected["completeness"])


def test_tank_day_is_the_same_without_a_stored_dic(
    session, make_site, make_station, make_tank, monkeypatch
):
    """A tank's day reads only its source's good readings with their stored DIC; a station
    with a good reading lacking the DIC is read whole and solved from pH and alkalinity
    instead. Both are the same closed-system water, so the day's minutes agree."""
    site = make_site(timezone=ZONE)
    station = make_station(site=site)
    tank = make_tank(site=site, station=station, omega_floor=1.5)
    times = [DAY_START + dt.timedelta(minutes=10 * i) for i in range(144)]
    readings = [
        stored_reading(station, t, ph=7.85 + 0.2 * math.sin(i / 9.0),
                       qc_overall=4 if i == 40 else 1)
        for i, t in enumerate(times)
    ]
    session.add_all(readings)
    session.commit()
    now = DAY_END + dt.timedelta(days=1)

    from app.status import service

    whole_reads = []
    original = service.stations_columns

    def counting(**kwargs):
        whole_reads.append(kwargs["station_pks"])
        return original(**kwargs)

    monkeypatch.setattr(service, "stations_columns", counting)

    def tank_day() -> dict:
        [status] = site_status(session=session, site=site, day=DAY, now=now)["tanks"]
        assert status["tank_id"] == tank.id
        return status

    with_dic = tank_day()
    assert whole_reads == []  # the good readings alone
    assert 0 < with_dic["minutes_below_floor"] < with_dic["minutes_with_data"]
    readings[7].dic_umol_kg = None
    session.commit()
    without = tank_day()
    assert whole_reads == [[station.pk]]  # the whole day, solved from pH and alkalinity
    for key in ("minutes_below_floor", "minutes_below_floor_untreated", "minutes_with_data"):
        assert without[key] == pytest.approx(with_dic[key], rel=1e-9), key
