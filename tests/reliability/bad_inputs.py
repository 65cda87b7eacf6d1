"""The bad-input corpus: requests the service must refuse with a 4xx and a sentence.

Each case names the request (method, path, whose key, body), the status expected and a
phrase the answer must contain (compared case-insensitively). The fixture layout they
assume (site ``cove``, station ``intake`` with a fixed alkalinity, tank ``larvae-1``, a
device of ``intake``) is built in ``test_bad_inputs.py``.

Bodies are given as ``json`` (serialised with Python's ``json``, which writes NaN and
Infinity tokens as such) or as ``raw`` bytes when the bytes themselves are the point.
Each case's ``name`` says what it is about; the tests run each case and, in one test, all
of them in a row.
"""

from __future__ import annotations

import json
from dataclasses import dataclass, field
from typing import Any

READINGS = "/api/v1/readings"
SITES = "/api/v1/sites"
STATIONS = "/api/v1/sites/cove/stations"
TANKS = "/api/v1/sites/cove/tanks"
SOLVE = "/api/v1/chemistry/solve"
GET_READINGS = "/api/v1/sites/cove/stations/intake/readings"
SAMPLES = "/api/v1/sites/cove/stations/intake/lab-samples"
BATCHES = "/api/v1/sites/cove/batches"
RULES = "/api/v1/sites/cove/alert-rules"
STATUS = "/api/v1/sites/cove/status"

# Well inside the past, so the "not in the future" rule never bites by accident.
OBSERVED_AT = "2026-03-01T08:00:00+00:00"

_ABSENT = object()


@dataclass(frozen=True)
class BadInput:
    name: str
    method: str
    path: str
    role: str  # "device", "admin" or "viewer"
    status: int
    phrase: str
    json: Any = _ABSENT
    raw: bytes | None = None
    content_type: str | None = "application/json"
    params: dict[str, str] = field(default_factory=dict)

    def body(self) -> bytes | None:
        if self.raw is not None:
            return self.raw
        if self.json is _ABSENT:
            return None
        return json.dumps(self.json).encode()

    def headers(self) -> dict[str, str]:
        return {} if self.content_type is None else {"Content-Type": self.content_type}


def reading(**changes: Any) -> dict[str, Any]:
    """A valid reading with ``changes`` applied (``None`` removes a field)."""
    base: dict[str, Any] = {
        "reading_id": "corpus-1",
        "observed_at": OBSERVED_AT,
        "temperature_c": 12.0,
        "salinity": 31.0,
        "ph": 7.9,
        "ph_scale": "total",
    }
    base.update(changes)
    return {key: value for key, value in base.items() if value is not None}


def _post_reading(name: str, status: int, phrase: str, **changes: Any) -> BadInput:
    return BadInput(name, "POST", READINGS, "device", status, phrase, json=reading(**changes))


def _range(field_name: str) -> str:
    from app.readings.schemas import READING_RANGES

    low, high, unit = READING_RANGES[field_name]
    return f"{field_name} must be a finite number from {low:g} to {high:g}{unit}"


_GOOD_READING_TEXT = json.dumps(reading())
_TANK = {
    "id": "t-new",
    "name": "New tank",
    "source_station_id": "intake",
    "stage": "nursery",
    "volume_l": 500,
    "culture_temperature_c": 20,
}
_SAMPLE = {
    "collected_at": OBSERVED_AT,
    "salinity": 31.0,
    "temperature_c": 20.0,
    "alkalinity_umol_kg": 2150.0,
    "ph": 7.9,
    "ph_scale": "total",
}

CASES: list[BadInput] = [
    # --- the body is not JSON, or not the JSON it claims to be ---------------------------
    BadInput(
        "truncated JSON",
        "POST",
        READINGS,
        "device",
        400,
        "not valid JSON",
        raw=b'{"readings": [' + _GOOD_READING_TEXT.encode(),
    ),
    BadInput(
        "trailing comma", "POST", READINGS, "device", 400, "not valid JSON", raw=b'{"ph": 7.9,}'
    ),
    BadInput(
        "single-quoted JSON", "POST", READINGS, "device", 400, "not valid JSON", raw=b"{'ph': 7.9}"
    ),
    BadInput(
        "JSON with a comment",
        "POST",
        READINGS,
        "device",
        400,
        "not valid JSON",
        raw=b'{"ph": 7.9 /* probe 2 */}',
    ),
    BadInput(
        "two JSON documents",
        "POST",
        READINGS,
        "device",
        400,
        "not valid JSON",
        raw=_GOOD_READING_TEXT.encode() * 2,
    ),
    BadInput(
        "not UTF-8",
        "POST",
        READINGS,
        "device",
        400,
        "UTF-8",
        raw=b'{"reading_id": "\xff\xfe", "ph": 7.9}',
    ),
    BadInput(
        "nesting 100000 deep",
        "POST",
        READINGS,
        "device",
        400,
        "JSON",
        raw=b"[" * 100_000 + b"]" * 100_000,
    ),
    BadInput(
        "integer of 5000 digits",
        "POST",
        READINGS,
        "device",
        400,
        "digits",
        raw=b'{"observed_at": "' + OBSERVED_AT.encode() + b'", "salinity": ' + b"9" * 5000 + b"}",
    ),
    BadInput(
        "plain-text content type",
        "POST",
        READINGS,
        "device",
        415,
        "application/json",
        raw=_GOOD_READING_TEXT.encode(),
        content_type="text/plain",
    ),
    BadInput(
        "form content type",
        "POST",
        READINGS,
        "device",
        415,
        "application/json",
        raw=b"ph=7.9&salinity=31",
        content_type="application/x-www-form-urlencoded",
    ),
    BadInput(
        "no content type",
        "POST",
        READINGS,
        "device",
        415,
        "content type was none",
        raw=_GOOD_READING_TEXT.encode(),
        content_type=None,
    ),
    BadInput(
        "XML to the site list",
        "POST",
        SITES,
        "admin",
        415,
        "application/json",
        raw=b"<site><id>x</id></site>",
        content_type="application/xml",
    ),
    BadInput(
        "duplicate key in a reading",
        "POST",
        READINGS,
        "device",
        422,
        "repeats the key 'ph'",
        raw=b'{"observed_at": "'
        + OBSERVED_AT.encode()
        + b'", "ph": 7.9, "ph_scale": "total", "ph": 9.9}',
    ),
    BadInput(
        "duplicate readings key",
        "POST",
        READINGS,
        "device",
        422,
        "repeats the key 'readings'",
        raw=b'{"readings": [], "readings": [' + _GOOD_READING_TEXT.encode() + b"]}",
    ),
    BadInput(
        "duplicate key in a site",
        "POST",
        SITES,
        "admin",
        422,
        "repeats the key 'id'",
        raw=b'{"id": "a", "name": "A", "timezone": "UTC", "id": "b"}',
    ),
    # --- the body is JSON of the wrong shape ----------------------------------------------
    BadInput("empty body", "POST", READINGS, "device", 422, "the request body is empty", raw=b""),
    BadInput("null body", "POST", READINGS, "device", 422, "the body must be", json=None),
    BadInput(
        "array instead of object",
        "POST",
        READINGS,
        "device",
        422,
        "the body must be",
        json=[reading()],
    ),
    BadInput("string body", "POST", READINGS, "device", 422, "the body must be", json="ph=7.9"),
    BadInput("number body", "POST", READINGS, "device", 422, "the body must be", json=7.9),
    BadInput(
        "readings is not a list",
        "POST",
        READINGS,
        "device",
        422,
        "readings must be a list",
        json={"readings": reading()},
    ),
    BadInput(
        "field beside readings",
        "POST",
        READINGS,
        "device",
        422,
        "beside readings",
        json={"readings": [reading()], "station": "intake"},
    ),
    BadInput(
        "empty batch",
        "POST",
        READINGS,
        "device",
        422,
        "1 to 5000 items; got 0",
        json={"readings": []},
    ),
    BadInput(
        "5001-item batch",
        "POST",
        READINGS,
        "device",
        422,
        "1 to 5000 items; got 5001",
        json={"readings": [reading(reading_id=f"b-{i}") for i in range(5001)]},
    ),
    BadInput(
        "100000 small items",
        "POST",
        READINGS,
        "device",
        422,
        "1 to 5000 items; got 100000",
        json={"readings": [{}] * 100_000},
    ),
    BadInput(
        "100000 full readings",
        "POST",
        READINGS,
        "device",
        413,
        "larger than the limit",
        json={"readings": [reading(reading_id=f"c-{i}") for i in range(100_000)]},
    ),
    BadInput(
        "10 MB body",
        "POST",
        READINGS,
        "device",
        413,
        "larger than the limit",
        raw=b'{"readings": [], "pad": "' + b"x" * (10 * 1024 * 1024) + b'"}',
    ),
    BadInput(
        "string item",
        "POST",
        READINGS,
        "device",
        422,
        "must be a JSON object",
        json={"readings": ["7.9"]},
    ),
    BadInput(
        "null item",
        "POST",
        READINGS,
        "device",
        422,
        "must be a JSON object",
        json={"readings": [None]},
    ),
    BadInput(
        "list item",
        "POST",
        READINGS,
        "device",
        422,
        "must be a JSON object",
        json={"readings": [[OBSERVED_AT, 7.9]]},
    ),
    # --- non-finite and huge numbers -------------------------------------------------------
    _post_reading("NaN pH", 422, _range("ph"), ph=float("nan")),
    _post_reading("Infinity temperature", 422, _range("temperature_c"), temperature_c=float("inf")),
    _post_reading("-Infinity salinity", 422, _range("salinity"), salinity=float("-inf")),
    BadInput(
        "1e400 pH (overflows to infinity)",
        "POST",
        READINGS,
        "device",
        422,
        _range("ph"),
        raw=_GOOD_READING_TEXT.replace('"ph": 7.9', '"ph": 1e400').encode(),
    ),
    _post_reading("huge integer salinity", 422, _range("salinity"), salinity=10**30),
    _post_reading("huge alkalinity", 422, _range("alkalinity_umol_kg"), alkalinity_umol_kg=1.0e300),
    # --- out of range ----------------------------------------------------------------------
    _post_reading("pH 99", 422, _range("ph"), ph=99),
    _post_reading("negative pH", 422, _range("ph"), ph=-1.0),
    _post_reading("negative salinity", 422, _range("salinity"), salinity=-0.5),
    _post_reading("salinity 60", 422, _range("salinity"), salinity=60),
    _post_reading("temperature in Fahrenheit", 422, _range("temperature_c"), temperature_c=75.0),
    _post_reading("temperature -40", 422, _range("temperature_c"), temperature_c=-40.0),
    _post_reading("alkalinity zero", 422, _range("alkalinity_umol_kg"), alkalinity_umol_kg=0),
    _post_reading(
        "alkalinity mg/L out of range",
        422,
        _range("alkalinity_mg_l_caco3"),
        alkalinity_mg_l_caco3=10000.0,
    ),
    # --- times -----------------------------------------------------------------------------
    _post_reading(
        "time without offset",
        422,
        "observed_at has no UTC offset",
        observed_at="2026-03-01T08:00:00",
    ),
    _post_reading(
        "year 3000",
        422,
        "more than 10 minutes in the future",
        observed_at="3000-01-01T00:00:00+00:00",
    ),
    _post_reading("time as words", 422, "observed_at", observed_at="yesterday morning"),
    _post_reading(
        "time as epoch number", 422, "observed_at must be an ISO 8601 time", observed_at=1772352000
    ),
    _post_reading("impossible date", 422, "observed_at", observed_at="2026-02-30T08:00:00Z"),
    _post_reading("missing time", 422, "observed_at is required", observed_at=None),
    # --- wrong types and missing or extra fields ----------------------------------------
    _post_reading("pH as words", 422, _range("ph"), ph="seven point nine"),
    _post_reading("pH as list", 422, _range("ph"), ph=[7.9]),
    _post_reading("pH as object", 422, _range("ph"), ph={"value": 7.9}),
    _post_reading("pH as boolean", 422, _range("ph"), ph=True),
    _post_reading("unknown pH scale", 422, "ph_scale must be one of", ph_scale="NBS-ish"),
    _post_reading("pH without scale", 422, "ph_scale is required with ph", ph_scale=None),
    _post_reading(
        "both alkalinities", 422, "not both", alkalinity_umol_kg=2100.0, alkalinity_mg_l_caco3=100.0
    ),
    _post_reading(
        "mg/L alkalinity without salinity",
        422,
        "needs temperature_c and salinity",
        alkalinity_mg_l_caco3=100.0,
        salinity=None,
    ),
    _post_reading(
        "no measurement",
        422,
        "at least one of temperature_c, salinity or ph",
        temperature_c=None,
        salinity=None,
        ph=None,
        ph_scale=None,
    ),
    _post_reading("extra field", 422, "colour is not a reading field", colour="green"),
    _post_reading("empty reading id", 422, "reading_id", reading_id=""),
    _post_reading("reading id of 500 characters", 422, "128", reading_id="r" * 500),
    _post_reading("reading id as number", 422, "reading_id", reading_id=12345),
    _post_reading(
        "SQL in reading id with bad pH",
        422,
        _range("ph"),
        reading_id="x'); DROP TABLE readings; --",
        ph=99,
    ),
    _post_reading(
        "unicode reading id with negative salinity",
        422,
        _range("salinity"),
        reading_id="\u6e29\u5ea6-\U0001f9aa-\u202e",
        salinity=-3,
    ),
    # --- configuration endpoints -----------------------------------------------------------
    BadInput(
        "site id with SQL",
        "POST",
        SITES,
        "admin",
        422,
        "lowercase letters",
        json={"id": "x'; DROP TABLE sites; --", "name": "X", "timezone": "UTC"},
    ),
    BadInput(
        "site id with unicode",
        "POST",
        SITES,
        "admin",
        422,
        "lowercase letters",
        json={"id": "caf\u00e9-\U0001f9aa", "name": "X", "timezone": "UTC"},
    ),
    BadInput(
        "unknown time zone",
        "POST",
        SITES,
        "admin",
        422,
        "IANA time zone",
        json={"id": "new-site", "name": "X", "timezone": "Mars/Olympus_Mons"},
    ),
    BadInput(
        "site without name",
        "POST",
        SITES,
        "admin",
        422,
        "name is required",
        json={"id": "new-site", "timezone": "UTC"},
    ),
    BadInput(
        "site name as number",
        "POST",
        SITES,
        "admin",
        422,
        "name",
        json={"id": "new-site", "name": 42, "timezone": "UTC"},
    ),
    BadInput(
        "extra site field",
        "POST",
        SITES,
        "admin",
        422,
        "owner is not a field here",
        json={"id": "new-site", "name": "X", "timezone": "UTC", "owner": "me"},
    ),
    BadInput(
        "site id taken",
        "POST",
        SITES,
        "admin",
        409,
        "cove",
        json={"id": "cove", "name": "Again", "timezone": "UTC"},
    ),
    BadInput(
        "site name set to null", "PATCH", f"{SITES}/cove", "admin", 422, "name", json={"name": None}
    ),
    BadInput(
        "unknown station role",
        "POST",
        STATIONS,
        "admin",
        422,
        "role",
        json={"id": "s-new", "name": "S", "role": "sewer"},
    ),
    BadInput(
        "station fixed alkalinity out of range",
        "POST",
        STATIONS,
        "admin",
        422,
        "alkalinity",
        json={
            "id": "s-new",
            "name": "S",
            "role": "intake",
            "alkalinity": {"mode": "fixed", "value": 99999},
        },
    ),
    BadInput(
        "negative tank volume",
        "POST",
        TANKS,
        "admin",
        422,
        "volume_l",
        json=_TANK | {"volume_l": -5},
    ),
    BadInput(
        "tank at 99 degC",
        "POST",
        TANKS,
        "admin",
        422,
        "culture_temperature_c",
        json=_TANK | {"culture_temperature_c": 99},
    ),
    BadInput(
        "tank on an unknown station",
        "POST",
        TANKS,
        "admin",
        422,
        "nowhere",
        json=_TANK | {"source_station_id": "nowhere"},
    ),
    BadInput(
        "tank on an unknown site",
        "POST",
        "/api/v1/sites/atlantis/tanks",
        "admin",
        404,
        "atlantis",
        json=_TANK,
    ),
    BadInput(
        "solve with pH 99",
        "POST",
        SOLVE,
        "viewer",
        422,
        "ph",
        json={"temperature": 12, "salinity": 31, "ph": 99, "alkalinity": 2150},
    ),
    BadInput(
        "solve with one parameter",
        "POST",
        SOLVE,
        "viewer",
        422,
        "two",
        json={"temperature": 12, "salinity": 31, "ph": 7.9},
    ),
    BadInput(
        "solve with NaN salinity",
        "POST",
        SOLVE,
        "viewer",
        422,
        "salinity",
        raw=b'{"temperature": 12, "salinity": NaN, "ph": 7.9, "alkalinity": 2150}',
    ),
    BadInput(
        "lab sample with negative salinity",
        "POST",
        SAMPLES,
        "admin",
        422,
        "salinity",
        json=_SAMPLE | {"salinity": -1},
    ),
    BadInput(
        "lab sample time without offset",
        "POST",
        SAMPLES,
        "admin",
        422,
        "collected_at",
        json=_SAMPLE | {"collected_at": "2026-03-01T08:00:00"},
    ),
    BadInput(
        "batch with negative count",
        "POST",
        BATCHES,
        "admin",
        422,
        "count_start",
        json={
            "id": "b1",
            "species": "Oyster",
            "tank_id": "larvae-1",
            "started_at": OBSERVED_AT,
            "count_start": -1,
        },
    ),
    BadInput(
        "alert rule with infinite level",
        "POST",
        RULES,
        "admin",
        422,
        "level",
        raw=b'{"tank_id": "larvae-1", "metric": "omega_aragonite", "direction": "below",'
        b' "level": Infinity}',
    ),
    # --- query strings ---------------------------------------------------------------------
    BadInput(
        "readings from a time without offset",
        "GET",
        GET_READINGS,
        "viewer",
        422,
        "start",
        params={"start": "2026-03-01T00:00:00"},
    ),
    BadInput(
        "readings every fortnight",
        "GET",
        GET_READINGS,
        "viewer",
        422,
        "every",
        params={"every": "fortnight"},
    ),
    BadInput(
        "readings as XML", "GET", GET_READINGS, "viewer", 422, "format", params={"format": "xml"}
    ),
    BadInput(
        "readings with start after end",
        "GET",
        GET_READINGS,
        "viewer",
        422,
        "start",
        params={"start": "2026-03-02T00:00:00Z", "end": "2026-03-01T00:00:00Z"},
    ),
    BadInput(
        "status for 2026-13-45", "GET", STATUS, "viewer", 422, "date", params={"date": "2026-13-45"}
    ),
]
