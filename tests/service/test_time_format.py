"""Times in every answer are written one way: ISO 8601 in UTC with ``Z`` (app/timefmt.py),
including the echo of a time posted with another offset."""

from __future__ import annotations

import datetime as dt
import re
from typing import Any

import pytest

pytestmark = pytest.mark.db

ISO_TIME = re.compile(r"^\d{4}-\d{2}-\d{2}T\d{2}:\d{2}")


def times_in(value: Any) -> list[str]:
    if isinstance(value, dict):
        return [t for item in value.values() for t in times_in(item)]
    if isinstance(value, list):
        return [t for item in value for t in times_in(item)]
    return [value] if isinstance(value, str) and ISO_TIME.match(value) else []


def assert_all_utc_z(answer: Any) -> None:
    times = times_in(answer)
    assert times, "the answer holds no time to check"
    for text in times:
        assert text.endswith("Z"), text
        assert dt.datetime.fromisoformat(text).utcoffset() == dt.timedelta(0)


@pytest.fixture
def scene(session, make_site, make_station, make_tank, make_device):
    site = make_site(id="cove", timezone="America/Vancouver")
    station = make_station(site=site, id="intake", alkalinity={"mode": "fixed", "value": 2150.0})
    make_tank(site=site, station=station, id="larvae-1")
    return make_device(station=station)[1]


def test_posted_offsets_come_back_in_utc(client, admin_headers, scene):
    sample = client.post(
        "/api/v1/sites/cove/stations/intake/lab-samples",
        json={"collected_at": "2026-03-01T08:00:00-08:00", "salinity": 31.0,
              "temperature_c": 12.0, "alkalinity_umol_kg": 2150},
        headers=admin_headers,
    )
    assert sample.status_code == 201, sample.text
    assert sample.json()["collected_at"] == "2026-03-01T16:00:00Z"
    assert_all_utc_z(sample.json())
    batch = client.post(
        "/api/v1/sites/cove/batches",
        json={"id": "b-1", "species": "oyster", "tank_id": "larvae-1",
              "started_at": "2026-03-01T06:30:00+05:30", "ended_at": "2026-03-03T00:00:00-07:00"},
        headers=admin_headers,
    )
    assert batch.status_code == 201, batch.text
    assert batch.json()["started_at"] == "2026-03-01T01:00:00Z"
    assert batch.json()["ended_at"] == "2026-03-03T07:00:00Z"
    assert_all_utc_z(batch.json())
    for url in ("/api/v1/sites/cove/stations/intake/lab-samples", "/api/v1/sites/cove/batches",
                "/api/v1/sites/cove/batches/b-1/exposure"):
        answer = client.get(url, headers=admin_headers)
        assert answer.status_code == 200, answer.text
        assert_all_utc_z(answer.json())


def test_readings_and_status_write_z(client, admin_headers, scene):
    device_key = scene
    now = dt.datetime.now(dt.UTC).replace(microsecond=0)
    posted = client.post(
        "/api/v1/readings",
        json={"readings": [
            {"observed_at": (now - dt.timedelta(minutes=10 - i)).astimezone(
                dt.timezone(dt.timedelta(hours=-7))).isoformat(),
             "temperature_c": 12.0, "salinity": 31.0, "ph": 7.9, "ph_scale": "total"}
            for i in range(3)
        ]},
        headers={"Authorization": f"Bearer {device_key}"},
    )
    assert posted.status_code == 200 and posted.json()["accepted"] == 3, posted.text
    for params in ({}, {"every": "15m"}):
        readings = client.get("/api/v1/sites/cove/stations/intake/readings", params=params,
                              headers=admin_headers)
        assert readings.status_code == 200, readings.text
        assert_all_utc_z(readings.json())
    status = client.get("/api/v1/sites/cove/status", headers=admin_headers)
    assert status.status_code == 200, status.text
    assert_all_utc_z(status.json())
    for url in ("/api/v1/sites/cove", "/api/v1/sites/cove/tanks"):
        assert_all_utc_z(client.get(url, headers=admin_headers).json())


def test_json_body_walks_plain_data_as_jsonable_encoder_does():
    # json_body walks plain containers itself and hands anything else to FastAPI's
    # jsonable_encoder: the two must give the same data for every kind of value.
    import enum
    from pathlib import PurePosixPath

    import numpy as np
    from fastapi.encoders import jsonable_encoder

    from app.timefmt import json_body, utc_iso

    class Colour(enum.Enum):
        RED = "red"

    class Label(enum.StrEnum):
        A = "a"

    pacific = dt.timezone(dt.timedelta(hours=-7))
    content = {
        "when": dt.datetime(2026, 6, 1, 5, 0, tzinfo=pacific),
        "naive": dt.datetime(2026, 6, 1, 12, 0, 0, 123000),
        "day": dt.date(2026, 6, 1),
        "numbers": (1, 2.5, True, None, np.float64(1.25), float("inf")),
        "nested": [{"a": [dt.datetime(2026, 1, 1, tzinfo=dt.UTC)]}, ("x", "y")],
        "_sa_instance_state": "left out",
        "enum": Colour.RED,
        "str_enum": Label.A,
        "path": PurePosixPath("/tmp/x"),
        "set": {3},
        "int_keys": {1: "one"},
    }
    expected = jsonable_encoder(content, custom_encoder={dt.datetime: utc_iso})
    assert json_body(content) == expected
    assert expected["when"] == "2026-06-01T12:00:00Z"
    assert "_sa_instance_state" not in json_body(content)
    assert json_body(content)["str_enum"] == "a" and type(json_body(content)["str_enum"]) is str
