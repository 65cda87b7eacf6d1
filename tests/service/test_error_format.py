"""One error format for the whole API: every 422 is ``{"detail": "<sentences>", "problems":
[...]}`` with sentences that name the field, its allowed range and the value sent.

The ranges are the declared ones of each schema (``Field(ge=..., le=...)``); the test reads
them back from the answer, so a change of range changes the expected sentence with it.
"""

from __future__ import annotations

import pytest

from app.errors import ErrorOut
from app.validation_sentences import problem_sentence, range_phrase

pytestmark = pytest.mark.db

SITE = "cove"
SAMPLE = {"collected_at": "2026-03-01T08:00:00Z", "salinity": 31.0, "temperature_c": 12.0}
TANK = {"id": "larvae-9", "name": "L9", "source_station_id": "intake", "stage": "larvae",
        "volume_l": 1000, "culture_temperature_c": 24}
STATION = {"id": "outfall", "name": "Outfall", "role": "intake"}
SOLVE = {"temperature": 12, "salinity": 31, "ph": 7.8, "ph_scale": "total", "alkalinity": 2150}

# (name, method, path, body or query, the sentence the answer must contain)
CASES = [
    ("solve ph 99", "POST", "/api/v1/chemistry/solve", SOLVE | {"ph": 99},
     "ph must be a finite number from 0 to 14; got 99"),
    ("solve salinity -1", "POST", "/api/v1/chemistry/solve", SOLVE | {"salinity": -1},
     "salinity must be a finite number from 0 to 50; got -1"),
    ("solve u_ph 2", "POST", "/api/v1/chemistry/solve", SOLVE | {"u_ph": 2},
     "u_ph must be a finite number from 0 to 1; got 2"),
    ("solve alkalinity 0 (exclusive)", "POST", "/api/v1/chemistry/solve",
     SOLVE | {"alkalinity": 0},
     "alkalinity must be a finite number more than 0 and at most 10000; got 0"),
    ("solve temperature text", "POST", "/api/v1/chemistry/solve",
     SOLVE | {"temperature": "warm"},
     "temperature must be a finite number from -2 to 45; got 'warm'"),
    ("solve ph_scale", "POST", "/api/v1/chemistry/solve", SOLVE | {"ph_scale": "ph"},
     "ph_scale must be one of 'total', 'seawater', 'free' or 'nbs'; got 'ph'"),
    ("site daily_summary_hour 24", "PATCH", f"/api/v1/sites/{SITE}",
     {"daily_summary_hour": 24}, "daily_summary_hour must be a whole number from 0 to 23; got 24"),
    ("station ph_uncertainty 2", "POST", f"/api/v1/sites/{SITE}/stations",
     STATION | {"ph_uncertainty": 2},
     "ph_uncertainty must be a finite number from 0 to 0.5; got 2"),
    ("tank volume 0", "POST", f"/api/v1/sites/{SITE}/tanks", TANK | {"volume_l": 0},
     "volume_l must be a finite number more than 0"),
    ("alert rule hold_minutes", "POST", f"/api/v1/sites/{SITE}/alert-rules",
     {"metric": "omega_aragonite", "direction": "below", "level": 1.5, "tank_id": "larvae-1",
      "hold_minutes": 5000},
     "hold_minutes must be a finite number from 0 to 1440; got 5000"),
    ("batch count_start -1", "POST", f"/api/v1/sites/{SITE}/batches",
     {"id": "b1", "species": "oyster", "tank_id": "larvae-1",
      "started_at": "2026-03-01T08:00:00Z", "count_start": -1},
     "count_start must be a whole number from 0 to"),
    ("sample salinity 75", "POST", f"/api/v1/sites/{SITE}/stations/intake/lab-samples",
     SAMPLE | {"salinity": 75}, "salinity must be a finite number from 0 to"),
    ("sample missing salinity", "POST", f"/api/v1/sites/{SITE}/stations/intake/lab-samples",
     {k: v for k, v in SAMPLE.items() if k != "salinity"}, "salinity is required"),
    ("status date not a date", "GET", f"/api/v1/sites/{SITE}/status", {"date": "2026-13-45"},
     "date must be a date written YYYY-MM-DD; got '2026-13-45'"),
    ("readings format", "GET", f"/api/v1/sites/{SITE}/stations/intake/readings",
     {"format": "xlsx"}, "format must be one of 'json' or 'csv'; got 'xlsx'"),
    ("extra field", "POST", f"/api/v1/sites/{SITE}/stations", STATION | {"colour": "blue"},
     "colour is not a field here"),
]


@pytest.fixture
def scene(make_site, make_station, make_tank):
    site = make_site(id=SITE)
    station = make_station(site=site, id="intake", alkalinity={"mode": "fixed", "value": 2150.0})
    make_tank(site=site, station=station, id="larvae-1")


@pytest.mark.parametrize("name, method, path, data, sentence", CASES,
                         ids=[case[0] for case in CASES])
def test_every_422_is_sentences_naming_field_and_range(client, admin_headers, scene, name,
                                                       method, path, data, sentence):
    if method == "GET":
        response = client.get(path, params=data, headers=admin_headers)
    else:
        response = client.request(method, path, json=data, headers=admin_headers)
    assert response.status_code == 422, response.text
    answer = response.json()
    ErrorOut.model_validate(answer)  # the declared error model
    assert isinstance(answer["detail"], str)
    assert sentence in answer["detail"], answer["detail"]
    assert answer["problems"], answer
    for problem in answer["problems"]:
        assert problem["sentence"] in answer["detail"]
        assert problem["loc"][0] in ("body", "query", "path")


def test_other_errors_have_the_same_detail_shape(client, admin_headers, viewer_headers, scene):
    for response in (
        client.get("/api/v1/sites/nowhere", headers=admin_headers),  # 404
        client.post("/api/v1/sites", json={"id": "x", "name": "x", "timezone": "UTC"},
                    headers=viewer_headers),  # 403
        client.get("/api/v1/sites"),  # 401
    ):
        assert response.status_code in (401, 403, 404)
        ErrorOut.model_validate(response.json())
        assert isinstance(response.json()["detail"], str)


def test_a_missing_site_or_station_reads_the_same_from_every_router(client, admin_headers, scene):
    # One sentence per missing thing, whichever router answers (common practice: one
    # vocabulary for one condition).
    for path in (
        "/api/v1/sites/nowhere",
        "/api/v1/sites/nowhere/stations/intake/readings",
        "/api/v1/sites/nowhere/tanks/larvae-1/advice",
        "/api/v1/sites/nowhere/alert-rules",
    ):
        response = client.get(path, headers=admin_headers)
        assert response.status_code == 404, (path, response.text)
        assert response.json()["detail"] == "There is no site with id 'nowhere'.", path
    for path in (
        f"/api/v1/sites/{SITE}/stations/outfall",
        f"/api/v1/sites/{SITE}/stations/outfall/readings",
    ):
        response = client.get(path, headers=admin_headers)
        assert response.status_code == 404, (path, response.text)
        assert response.json()["detail"] == f"Site '{SITE}' has no station with id 'outfall'."
    response = client.get(f"/api/v1/sites/{SITE}/tanks/larvae-9/advice", headers=admin_headers)
    assert response.json()["detail"] == f"Site '{SITE}' has no tank with id 'larvae-9'."


@pytest.mark.parametrize(
    "bounds, phrase",
    [
        ({"ge": 0, "le": 14}, "from 0 to 14"),
        ({"gt": 0, "le": 10000.0}, "more than 0 and at most 10000"),
        ({"ge": 1}, "at least 1"),
        ({"lt": 2.5}, "less than 2.5"),
        ({}, ""),
    ],
)
def test_range_phrases(bounds, phrase):
    assert range_phrase(bounds) == phrase


def test_a_problem_without_a_declared_field_still_gets_its_bound_and_value():
    problem = {"type": "less_than_equal", "loc": ("body", "x"), "msg": "...", "input": 99,
               "ctx": {"le": 14}}
    assert problem_sentence(problem) == "x must be a finite number at most 14; got 99"
    assert problem_sentence({"type": "missing", "loc": ("body",), "msg": "Field required"}) == (
        "the request body is empty; send a JSON object")
