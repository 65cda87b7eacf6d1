"""POST /api/v1/readings: validation, duplicates, derived chemistry, QC, auth.

Derived values are checked against ``chemistry.solve`` and ``chemistry.standard_uncertainty``
called independently here with the same inputs; the chemistry itself is checked against
published values in tests/chemistry/.
"""

from __future__ import annotations

import datetime as dt
import json
from typing import Any

import numpy as np
import pytest
from sqlalchemy import func, select

from app.readings import ingest as ingest_module
from app.readings.ingest import ingest_readings
from app.readings.models import Reading
from chemistry import (
    CHEMISTRY_VERSION,
    alkalinity_from_mg_per_l_caco3,
    solve,
    standard_uncertainty,
)

pytestmark = pytest.mark.db

NOW = dt.datetime.now(dt.UTC).replace(microsecond=0)


def at(minutes_ago: float) -> str:
    return (NOW - dt.timedelta(minutes=minutes_ago)).isoformat()


def reading(minutes_ago: float, **fields: Any) -> dict[str, Any]:
    return {
        "observed_at": at(minutes_ago),
        "temperature_c": 11.8,
        "salinity": 31.2,
        "ph": 7.71,
        "ph_scale": "nbs",
    } | fields


def auth(key: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {key}"}


def stored(session, station) -> list[Reading]:
    return list(
        session.scalars(
            select(Reading).where(Reading.station_pk == station.pk).order_by(Reading.observed_at)
        )
    )


@pytest.fixture
def fixed_station(make_station):
    return make_station(alkalinity={"mode": "fixed", "value": 2150.0, "uncertainty": 12.0})


@pytest.fixture
def device_key(make_device, fixed_station) -> str:
    return make_device(station=fixed_station)[1]


def test_derived_chemistry_matches_the_engine(client, session, fixed_station, device_key):
    body = {"readings": [reading(30), reading(20, ph=7.80, temperature_c=12.4), reading(10)]}
    response = client.post("/api/v1/readings", json=body, headers=auth(device_key))
    assert response.status_code == 200, response.text
    assert response.json() == {"accepted": 3, "duplicates": 0, "rejected": []}

    rows = stored(session, fixed_station)
    temperature = np.array([r.temperature_c for r in rows])
    salinity = np.array([r.salinity for r in rows])
    ph = np.array([r.ph for r in rows])
    expected = solve(
        temperature=temperature, salinity=salinity, ph=ph, alkalinity=2150.0, ph_scale="nbs"
    )
    u = standard_uncertainty(
        temperature=temperature,
        salinity=salinity,
        ph=ph,
        alkalinity=2150.0,
        ph_scale="nbs",
        u_ph=0.05,  # the station's default ph_uncertainty
        u_alkalinity=12.0,  # the station's fixed-mode uncertainty
    )
    np.testing.assert_allclose([r.omega_aragonite for r in rows], expected.omega_aragonite)
    np.testing.assert_allclose([r.omega_calcite for r in rows], expected.omega_calcite)
    np.testing.assert_allclose([r.ph_total for r in rows], expected.ph_total)
    np.testing.assert_allclose([r.dic_umol_kg for r in rows], expected.dic)
    np.testing.assert_allclose([r.pco2_uatm for r in rows], expected.pco2)
    np.testing.assert_allclose([r.carbonate_umol_kg for r in rows], expected.carbonate)
    np.testing.assert_allclose(
        [r.omega_aragonite_uncertainty for r in rows], u["omega_aragonite"], rtol=1e-9
    )
    for row in rows:
        assert row.alkalinity_source == "fixed"
        assert row.alkalinity_used_umol_kg == 2150.0
        assert row.alkalinity_input_umol_kg is None
        assert row.chemistry_version == CHEMISTRY_VERSION
        assert row.source.startswith("dev_")
        assert row.qc_alkalinity == 2  # from the station: not evaluated


def test_alkalinity_in_mg_per_l_is_converted_and_used(client, session, make_station, make_device):
    station = make_station(alkalinity={"mode": "fixed", "value": 2000.0})
    key = make_device(station=station)[1]
    body = reading(5, alkalinity_mg_l_caco3=110.0)
    response = client.post("/api/v1/readings", json=body, headers=auth(key))
    assert response.json()["accepted"] == 1
    (row,) = stored(session, station)
    expected = float(alkalinity_from_mg_per_l_caco3(110.0, 11.8, 31.2))
    assert row.alkalinity_input_umol_kg == pytest.approx(expected, rel=1e-12)
    assert row.alkalinity_used_umol_kg == pytest.approx(expected, rel=1e-12)
    assert row.alkalinity_source == "reading"
    state = solve(temperature=11.8, salinity=31.2, ph=7.71, alkalinity=expected, ph_scale="nbs")
    assert row.omega_aragonite == pytest.approx(float(state.omega_aragonite), rel=1e-9)


def test_salinity_line_alkalinity(client, session, make_station, make_device):
    station = make_station(alkalinity={"mode": "salinity_line", "slope": 47.7, "intercept": 647.0})
    key = make_device(station=station)[1]
    client.post("/api/v1/readings", json=reading(5, salinity=30.0), headers=auth(key))
    (row,) = stored(session, station)
    assert row.alkalinity_source == "salinity_line"
    assert row.alkalinity_used_umol_kg == pytest.approx(47.7 * 30.0 + 647.0)


def test_without_any_alkalinity_the_reading_is_kept_underived(
    client, session, make_station, make_device
):
    station = make_station()  # mode "reading"
    key = make_device(station=station)[1]
    response = client.post("/api/v1/readings", json=reading(5), headers=auth(key))
    assert response.json()["accepted"] == 1
    (row,) = stored(session, station)
    assert row.omega_aragonite is None and row.ph_total is None
    assert row.alkalinity_source is None
    assert row.chemistry_version is None
    assert row.qc_alkalinity == 9 and row.qc_derived == 9


def test_retry_is_a_duplicate_and_never_stored_twice(client, session, fixed_station, device_key):
    body = {"readings": [reading(30, reading_id="a1"), reading(20, reading_id="a2"), reading(10)]}
    first = client.post("/api/v1/readings", json=body, headers=auth(device_key)).json()
    again = client.post("/api/v1/readings", json=body, headers=auth(device_key)).json()
    assert first == {"accepted": 3, "duplicates": 0, "rejected": []}
    assert again == {"accepted": 0, "duplicates": 3, "rejected": []}
    assert len(stored(session, fixed_station)) == 3


def test_same_key_with_other_values_is_rejected_not_overwritten(
    client, session, fixed_station, device_key
):
    client.post(
        "/api/v1/readings",
        json={"readings": [reading(30, reading_id="a1"), reading(20)]},
        headers=auth(device_key),
    )
    changed = {
        "readings": [
            reading(25, reading_id="a1"),  # same id, other time
            reading(20, ph=7.9),  # same time, other pH
            reading(15),  # new
        ]
    }
    answer = client.post("/api/v1/readings", json=changed, headers=auth(device_key)).json()
    assert answer["accepted"] == 1 and answer["duplicates"] == 0
    assert [item["index"] for item in answer["rejected"]] == [0, 1]
    assert "reading_id 'a1'" in answer["rejected"][0]["errors"][0]
    assert "never overwritten" in answer["rejected"][1]["errors"][0]
    rows = stored(session, fixed_station)
    assert len(rows) == 3
    assert [r.ph for r in rows] == [7.71, 7.71, 7.71]


def test_repeats_inside_one_request(client, session, fixed_station, device_key):
    body = {"readings": [reading(10), reading(10), reading(10, ph=7.5)]}
    answer = client.post("/api/v1/readings", json=body, headers=auth(device_key)).json()
    assert answer["accepted"] == 1 and answer["duplicates"] == 1
    assert [item["index"] for item in answer["rejected"]] == [2]
    assert len(stored(session, fixed_station)) == 1


def test_large_requests_settle_retries_conflicts_and_backfills_like_small_ones(
    client, session, fixed_station, device_key
):
    # More than ingest.SMALL_REQUEST items: the stored matches are looked up by time span
    # and id lists (on SQLite on the driver's own cursor), not in the one small query.
    count = 3 * ingest_module.SMALL_REQUEST
    first = [reading(10 + 2 * n, reading_id=f"big-{n}") for n in range(count)]
    body = {"readings": first}
    assert client.post("/api/v1/readings", json=body, headers=auth(device_key)).json() == {
        "accepted": count,
        "duplicates": 0,
        "rejected": [],
    }
    again = client.post("/api/v1/readings", json=body, headers=auth(device_key)).json()
    assert again == {"accepted": 0, "duplicates": count, "rejected": []}

    mixed = [
        reading(10, reading_id="big-0", ph=7.9),  # same id and time, other pH
        reading(12.5, reading_id="big-1"),  # same id, other time
        reading(14, reading_id="other"),  # same time as big-2, other id
        # Backfills between stored readings: the span is crowded with stored rows.
        *(reading(11 + 2 * n, reading_id=f"fill-{n}") for n in range(count)),
    ]
    answer = client.post("/api/v1/readings", json={"readings": mixed}, headers=auth(device_key))
    answer = answer.json()
    assert answer["accepted"] == count and answer["duplicates"] == 0
    errors = {item["index"]: " ".join(item["errors"]) for item in answer["rejected"]}
    assert sorted(errors) == [0, 1, 2]
    assert "reading_id 'big-0'" in errors[0] and "never overwritten" in errors[0]
    assert "reading_id 'big-1'" in errors[1]
    assert "observed_at" in errors[2]
    rows = stored(session, fixed_station)
    assert len(rows) == 2 * count
    assert all(r.ph == 7.71 for r in rows)
    assert len({r.reading_id for r in rows}) == 2 * count


def test_bad_items_are_rejected_with_sentences_good_items_stored(
    client, session, fixed_station, device_key
):
    items = [
        reading(50),
        reading(45, temperature_c=float("nan")),
        reading(40, salinity=60.0),
        reading(35, observed_at=(NOW - dt.timedelta(minutes=35)).replace(tzinfo=None).isoformat()),
        reading(0, observed_at=(NOW + dt.timedelta(hours=1)).isoformat()),
        reading(30, ph_scale=None),
        reading(25, alkalinity_umol_kg=2100.0, alkalinity_mg_l_caco3=100.0),
        reading(20, ph=float("inf")),
        reading(15, colour="blue"),
        "not an object",
        reading(10),
    ]
    # Python's json writes NaN and Infinity literals, which some sensors send too.
    content = json.dumps({"readings": items})
    response = client.post(
        "/api/v1/readings",
        content=content,
        headers=auth(device_key) | {"Content-Type": "application/json"},
    )
    assert response.status_code == 200, response.text
    answer = response.json()
    assert answer["accepted"] == 2
    errors = {item["index"]: " ".join(item["errors"]) for item in answer["rejected"]}
    assert sorted(errors) == [1, 2, 3, 4, 5, 6, 7, 8, 9]
    assert "temperature_c must be a finite number from -2 to 45 degC" in errors[1]
    assert "salinity must be a finite number from 0 to 50" in errors[2]
    assert "observed_at has no UTC offset" in errors[3]
    assert "more than 10 minutes in the future" in errors[4]
    assert "ph_scale is required with ph" in errors[5]
    assert "not both" in errors[6]
    assert "ph must be a finite number from 0 to 14" in errors[7]
    assert "colour is not a reading field" in errors[8]
    assert "JSON object" in errors[9]
    assert len(stored(session, fixed_station)) == 2


def test_a_single_object_body_is_accepted(client, session, fixed_station, device_key):
    answer = client.post("/api/v1/readings", json=reading(3), headers=auth(device_key)).json()
    assert answer == {"accepted": 1, "duplicates": 0, "rejected": []}


@pytest.mark.parametrize(
    ("body", "phrase"),
    [
        ({"readings": []}, "1 to 5000 items; got 0"),
        ({"readings": [reading(1)] * 5001}, "1 to 5000 items; got 5001"),
        ([reading(1)], "the body must be"),
        ({"readings": "x"}, "readings must be a list"),
    ],
)
def test_badly_shaped_bodies_are_refused_whole(
    client, session, fixed_station, device_key, body, phrase
):
    response = client.post("/api/v1/readings", json=body, headers=auth(device_key))
    assert response.status_code == 422
    assert phrase in response.json()["detail"]
    assert stored(session, fixed_station) == []


def test_only_device_keys_post_and_only_to_their_own_station(
    client, session, make_station, make_device, admin_key, viewer_key
):
    station_a = make_station(alkalinity={"mode": "fixed", "value": 2150.0})
    station_b = make_station(alkalinity={"mode": "fixed", "value": 2150.0})
    key_a = make_device(station=station_a)[1]
    assert client.post("/api/v1/readings", json=reading(5)).status_code == 401
    for key in (admin_key, viewer_key):
        assert (
            client.post("/api/v1/readings", json=reading(5), headers=auth(key)).status_code == 403
        )
    assert client.post("/api/v1/readings", json=reading(5), headers=auth(key_a)).status_code == 200
    assert len(stored(session, station_a)) == 1
    assert stored(session, station_b) == []
    # Device A cannot read station B (or A) with its device key either.
    response = client.get(
        f"/api/v1/sites/{station_b.site_id}/stations/{station_b.id}/readings", headers=auth(key_a)
    )
    assert response.status_code == 403


def test_revoked_device_cannot_post(client, admin_key, make_station, make_device):
    station = make_station(alkalinity={"mode": "fixed", "value": 2150.0})
    device, key = make_device(station=station)
    revoke = client.delete(
        f"/api/v1/sites/{station.site_id}/stations/{station.id}/devices/{device.id}",
        headers=auth(admin_key),
    )
    assert revoke.status_code in (200, 204)
    assert client.post("/api/v1/readings", json=reading(5), headers=auth(key)).status_code == 401


def test_qc_flags_a_sensor_fault_and_keeps_the_reading(client, session, fixed_station, device_key):
    body = {"readings": [reading(30), reading(25, ph=5.2), reading(20)]}
    client.post("/api/v1/readings", json=body, headers=auth(device_key))
    rows = stored(session, fixed_station)
    assert len(rows) == 3
    # pH 5.2 lies below the default sensor span (6.0 to 9.5): QARTOD gross range fail.
    assert rows[1].qc_ph == 4 and rows[1].qc_overall == 4 and rows[1].qc_derived == 4
    # A broken sensor's value is kept as sent but no chemistry is derived from it.
    assert rows[1].ph == 5.2
    assert rows[1].omega_aragonite is None and rows[1].chemistry_version is None
    assert rows[0].omega_aragonite is not None
    assert rows[0].qc_overall != 4 and rows[2].qc_overall != 4


def test_backfilled_reading_is_tested_in_time_order(client, session, make_station, make_device):
    late = make_station(alkalinity={"mode": "fixed", "value": 2150.0})
    in_order = make_station(alkalinity={"mode": "fixed", "value": 2150.0})
    late_key, in_order_key = make_device(station=late)[1], make_device(station=in_order)[1]
    spike = reading(15, temperature_c=16.0)

    client.post(
        "/api/v1/readings", json={"readings": [reading(20), reading(10)]}, headers=auth(late_key)
    )
    client.post("/api/v1/readings", json=spike, headers=auth(late_key))
    client.post(
        "/api/v1/readings",
        json={"readings": [reading(20), spike, reading(10)]},
        headers=auth(in_order_key),
    )
    session.expire_all()
    late_rows, ordered_rows = stored(session, late), stored(session, in_order)
    assert [r.temperature_c for r in late_rows] == [11.8, 16.0, 11.8]
    # Neighbours' mean 11.8, height 4.2 > 3 degC (default spike_fail): QARTOD spike fail,
    # judged against its neighbours in time although it arrived last.
    assert late_rows[1].qc_temperature == 4
    flags = ("qc_temperature", "qc_salinity", "qc_ph", "qc_derived", "qc_overall")
    assert [[getattr(r, f) for f in flags] for r in late_rows] == [
        [getattr(r, f) for f in flags] for r in ordered_rows
    ]


def test_newest_reading_is_tested_again_when_its_successor_arrives(
    client, session, fixed_station, device_key
):
    client.post(
        "/api/v1/readings",
        json={"readings": [reading(20), reading(15, temperature_c=16.0)]},
        headers=auth(device_key),
    )
    # Without a successor the spike test cannot run; the gross range passes (16 degC).
    assert stored(session, fixed_station)[1].qc_temperature == 1
    client.post("/api/v1/readings", json=reading(10), headers=auth(device_key))
    session.expire_all()
    rows = stored(session, fixed_station)
    assert rows[1].qc_temperature == 4 and rows[1].qc_overall == 4


def test_a_concurrent_insert_of_the_same_reading_counts_as_duplicate(
    session, fixed_station, monkeypatch
):
    item = reading(5, reading_id="race-1")
    first = ingest_readings(
        session=session, station=fixed_station, source="dev_x", items=[item], now=NOW
    )
    assert first.accepted == 1
    # Simulate the other request: its check ran before our insert was visible, so it
    # finds nothing and relies on the unique constraint at insert time.
    real = ingest_module._stored_matches
    calls = {"n": 0}

    def blind_first_check(*args: Any, **kwargs: Any) -> list[Any]:
        calls["n"] += 1
        return [] if calls["n"] == 1 else real(*args, **kwargs)

    monkeypatch.setattr(ingest_module, "_stored_matches", blind_first_check)
    second = ingest_readings(
        session=session, station=fixed_station, source="dev_x", items=[item], now=NOW
    )
    assert (second.accepted, second.duplicates, second.rejected) == (0, 1, [])
    count = session.scalar(
        select(func.count()).select_from(Reading).where(Reading.station_pk == fixed_station.pk)
    )
    assert count == 1
