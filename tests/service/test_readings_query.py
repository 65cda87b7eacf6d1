"""GET /api/v1/sites/{site}/stations/{station}/readings: ranges, aggregation, CSV, auth.

Bucket statistics are recomputed here with numpy from the stored rows (mean, min and
max by definition); failed readings (overall QC flag 4) must be left out.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
from typing import Any

import numpy as np
import pytest
from sqlalchemy import select

from app.readings import queries
from app.readings.models import Reading

pytestmark = pytest.mark.db

# A fixed quarter-hour boundary in the recent past, so that buckets are predictable.
_now = dt.datetime.now(dt.UTC)
BASE = (_now - dt.timedelta(hours=3)).replace(minute=0, second=0, microsecond=0)


def auth(key: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {key}"}


def iso(moment: dt.datetime) -> str:
    return moment.isoformat().replace("+00:00", "Z")


def reading(minutes: int, **fields: Any) -> dict[str, Any]:
    return {
        "observed_at": iso(BASE + dt.timedelta(minutes=minutes)),
        "temperature_c": 12.0 + 0.1 * (minutes % 7),
        "salinity": 31.0,
        "ph": 7.80 + 0.01 * (minutes % 5),
        "ph_scale": "nbs",
    } | fields


@pytest.fixture
def station_with_data(client, make_station, make_device):
    station = make_station(alkalinity={"mode": "fixed", "value": 2150.0})
    key = make_device(station=station)[1]
    items = [reading(m) for m in range(0, 60, 5)]
    items[4] = reading(20, ph=5.0)  # below the sensor span: fails QC
    response = client.post("/api/v1/readings", json={"readings": items}, headers=auth(key))
    assert response.json()["accepted"] == 12
    return station


def url(station) -> str:
    return f"/api/v1/sites/{station.site_id}/stations/{station.id}/readings"


def window(start_min: int = 0, end_min: int = 60) -> dict[str, str]:
    return {
        "start": iso(BASE + dt.timedelta(minutes=start_min)),
        "end": iso(BASE + dt.timedelta(minutes=end_min)),
    }


def test_raw_readings_in_range_with_derived_values_and_flags(client, station_with_data, viewer_key):
    response = client.get(url(station_with_data), params=window(10, 30), headers=auth(viewer_key))
    assert response.status_code == 200, response.text
    body = response.json()
    times = [r["observed_at"] for r in body["readings"]]
    # start is inclusive, end exclusive.
    assert len(times) == 4
    assert dt.datetime.fromisoformat(times[0]) == BASE + dt.timedelta(minutes=10)
    first = body["readings"][0]
    assert first["omega_aragonite"] > 0 and first["alkalinity_source"] == "fixed"
    assert {"qc_ph", "qc_overall", "ph_total", "omega_aragonite_uncertainty"} <= set(first)
    failed = body["readings"][2]
    assert failed["ph"] == 5.0 and failed["qc_overall"] == 4


def test_aggregates_leave_out_failed_readings(client, session, station_with_data, admin_key):
    response = client.get(
        url(station_with_data),
        params=window() | {"every": "15m"},
        headers=auth(admin_key),
    )
    assert response.status_code == 200, response.text
    buckets = response.json()["buckets"]
    assert len(buckets) == 4
    rows = list(
        session.scalars(
            select(Reading)
            .where(Reading.station_pk == station_with_data.pk)
            .order_by(Reading.observed_at)
        )
    )
    for i, bucket in enumerate(buckets):
        assert dt.datetime.fromisoformat(bucket["bucket_start"]) == BASE + dt.timedelta(
            minutes=15 * i
        )
        members = rows[3 * i : 3 * i + 3]
        good = [r for r in members if r.qc_overall != 4]
        assert bucket["readings"] == len(good)
        assert bucket["failed"] == len(members) - len(good)
        for column in ("ph", "temperature_c", "omega_aragonite"):
            values = np.array([getattr(r, column) for r in good])
            assert bucket[f"{column}_mean"] == pytest.approx(values.mean(), rel=1e-12)
            assert bucket[f"{column}_min"] == pytest.approx(values.min(), rel=1e-12)
            assert bucket[f"{column}_max"] == pytest.approx(values.max(), rel=1e-12)
    # The bucket holding the failed pH 5.0 shows no trace of it.
    assert buckets[1]["failed"] == 1
    assert buckets[1]["ph_min"] > 7.0


def test_csv_parses_and_matches_the_json(client, station_with_data, viewer_key):
    params = window()
    as_json = client.get(url(station_with_data), params=params, headers=auth(viewer_key)).json()
    response = client.get(
        url(station_with_data), params=params | {"format": "csv"}, headers=auth(viewer_key)
    )
    assert response.status_code == 200
    assert response.headers["content-type"].startswith("text/csv")
    assert "attachment" in response.headers["content-disposition"]
    table = list(csv.DictReader(io.StringIO(response.text)))
    assert len(table) == len(as_json["readings"]) == 12
    for line, item in zip(table, as_json["readings"], strict=True):
        assert dt.datetime.fromisoformat(line["observed_at"]) == dt.datetime.fromisoformat(
            item["observed_at"]
        )
        omega = line["omega_aragonite"]
        if item["omega_aragonite"] is None:
            assert omega == ""
        else:  # CSV keeps three decimals of omega (queries.CSV_DECIMALS)
            assert float(omega) == round(item["omega_aragonite"], 3)
            assert len(omega.partition(".")[2]) <= 3
        assert int(line["qc_overall"]) == item["qc_overall"]
        assert line["reading_id"] == ""  # null is an empty cell
    # The failed reading (pH 5.0, outside the sensor span) has no derived values.
    assert table[4]["ph"] == "5.0" and table[4]["omega_aragonite"] == ""


@pytest.mark.parametrize(
    ("value", "column", "text"),
    [
        (2158.7200000000003, "alkalinity_used_umol_kg", "2158.7"),
        (7.812345678, "ph_total", "7.8123"),
        (7.9, "ph", "7.9"),
        (0.86712345, "omega_aragonite_mean", "0.867"),
        (-0.0000001, "temperature_c", "0.0"),
        (1.0000000000000002, "some_other_number", "1"),
        (12, "qc_overall", 12),
    ],
)
def test_csv_numbers_are_rounded_per_column(value, column, text):
    assert queries._csv_value(value, column) == text


def test_aggregated_csv(client, station_with_data, viewer_key):
    response = client.get(
        url(station_with_data),
        params=window() | {"every": "1h", "format": "csv"},
        headers=auth(viewer_key),
    )
    table = list(csv.DictReader(io.StringIO(response.text)))
    assert len(table) == 1
    assert int(table[0]["readings"]) == 11 and int(table[0]["failed"]) == 1
    assert float(table[0]["omega_aragonite_min"]) <= float(table[0]["omega_aragonite_mean"])


@pytest.mark.parametrize(
    ("params", "phrase"),
    [
        ({"every": "7"}, "every must be a number and a unit"),
        ({"every": "10s"}, "every must be from 1m to 31d"),
        ({"start": "2026-06-01T00:00:00"}, "start has no UTC offset"),
        (
            {"start": "2026-06-02T00:00:00Z", "end": "2026-06-01T00:00:00Z"},
            "must be before end",
        ),
    ],
)
def test_bad_query_parameters_are_named(client, station_with_data, viewer_key, params, phrase):
    response = client.get(url(station_with_data), params=params, headers=auth(viewer_key))
    assert response.status_code == 422
    assert phrase in response.json()["detail"]


def test_default_window_is_the_last_day(client, station_with_data, viewer_key):
    body = client.get(url(station_with_data), headers=auth(viewer_key)).json()
    assert len(body["readings"]) == 12


def test_unknown_station_and_roles(client, station_with_data, make_device, viewer_key):
    site = station_with_data.site_id
    missing = client.get(
        f"/api/v1/sites/{site}/stations/nowhere/readings", headers=auth(viewer_key)
    )
    assert missing.status_code == 404 and "nowhere" in missing.json()["detail"]
    assert client.get(url(station_with_data)).status_code == 401
    device_key = make_device(station=station_with_data)[1]
    assert client.get(url(station_with_data), headers=auth(device_key)).status_code == 403
