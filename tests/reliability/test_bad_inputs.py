"""Every case of the bad-input corpus (bad_inputs.py) is refused with a 4xx and a sentence,
stores nothing, and leaves the server answering.

Row counts of every table are taken before and after each request: a refused request must
not add or remove a row anywhere (the rolled-back test transaction would hide nothing
here, since the app commits into the same session the counts are read from).
"""

from __future__ import annotations

import pytest
from sqlalchemy import func, select
from sqlalchemy.orm import Session

from app.db import Base
from tests.reliability.bad_inputs import CASES, BadInput

pytestmark = pytest.mark.db


@pytest.fixture
def keys(session, make_site, make_station, make_tank, make_device, admin_key, viewer_key):
    site = make_site(id="cove")
    station = make_station(site=site, id="intake", alkalinity={"mode": "fixed", "value": 2150.0})
    make_tank(site=site, station=station, id="larvae-1")
    _device, device_key = make_device(station=station)
    return {"device": device_key, "admin": admin_key, "viewer": viewer_key}


def row_counts(session: Session) -> dict[str, int]:
    session.expire_all()
    return {
        table.name: session.execute(select(func.count()).select_from(table)).scalar_one()
        for table in Base.metadata.sorted_tables
    }


def send(client, case: BadInput, keys: dict[str, str]):
    headers = case.headers() | {"Authorization": f"Bearer {keys[case.role]}"}
    return client.request(
        case.method, case.path, content=case.body(), params=case.params, headers=headers
    )


def check_refusal(response, case: BadInput) -> None:
    assert response.status_code == case.status, f"{case.name}: {response.text[:2000]}"
    answer = response.json()
    sentence = answer["detail"]
    # Sentences, not a code: the detail is words naming the problem.
    assert isinstance(sentence, str) and len(sentence.split()) >= 3, answer
    assert case.phrase.lower() in response.text.lower(), f"{case.name}: {response.text[:2000]}"


def test_the_corpus_is_large_and_covers_the_kinds_of_bad_input():
    assert len(CASES) >= 60
    assert {case.status for case in CASES} >= {400, 404, 409, 413, 415, 422}
    names = " ".join(case.name for case in CASES).lower()
    for kind in (
        "json",
        "nan",
        "infinity",
        "huge",
        "ph 99",
        "negative salinity",
        "offset",
        "year 3000",
        "10 mb",
        "100000",
        "unicode",
        "sql",
        "content type",
        "duplicate key",
        "empty body",
        "array instead of object",
        "missing",
        "extra",
    ):
        assert kind in names, kind


@pytest.mark.parametrize("case", CASES, ids=[case.name for case in CASES])
def test_bad_input_is_refused_and_changes_nothing(client, session, keys, case):
    before = row_counts(session)
    response = send(client, case, keys)
    check_refusal(response, case)
    assert row_counts(session) == before
    health = client.get("/healthz")
    assert health.status_code == 200, health.text


def test_the_corpus_in_a_row_then_good_readings_still_go_in(client, session, keys):
    """All cases one after the other on one app, then a good reading is stored."""
    before = row_counts(session)
    for case in CASES:
        check_refusal(send(client, case, keys), case)
    assert row_counts(session) == before
    good = client.post(
        "/api/v1/readings",
        json={"observed_at": "2026-03-01T09:00:00Z", "ph": 7.9, "ph_scale": "total"},
        headers={"Authorization": f"Bearer {keys['device']}"},
    )
    assert good.status_code == 200, good.text
    assert good.json()["accepted"] == 1
