"""The column-wise check of posted readings (``validate_readings``) against the model.

``validate_readings`` passes the usual item without building a ``ReadingIn``; whatever it
passes must carry exactly the values the model gives, and whatever it does not pass must
get the model's own answer. The reference here is ``validate_reading`` (the model, item
by item), so these checks say nothing about the ranges themselves: those are tested with
their sources in test_readings_api.py.
"""

from __future__ import annotations

import datetime as dt
from typing import Any

import pytest

from app.readings.schemas import (
    CheckedReading,
    ReadingIn,
    validate_reading,
    validate_readings,
)

NOW = dt.datetime(2026, 6, 1, 12, 0, tzinfo=dt.UTC)
FIELDS = tuple(ReadingIn.model_fields)
MINUS_7 = dt.timezone(dt.timedelta(hours=-7))

BASE: dict[str, Any] = {
    "observed_at": "2026-06-01T05:00:00-07:00",
    "temperature_c": 11.8,
    "salinity": 31.2,
    "ph": 7.71,
    "ph_scale": "nbs",
}

# Items the column-wise check passes by itself.
PLAIN = [
    BASE,
    BASE | {"reading_id": "probe-7-000123"},
    BASE | {"reading_id": "x" * 128},
    BASE | {"observed_at": "2026-06-01T12:00:00Z"},
    BASE | {"observed_at": "2026-06-01T12:09:59.999999Z"},  # just inside the 10 minutes
    BASE | {"observed_at": "2026-06-01T17:30:00.5+05:30"},
    BASE | {"observed_at": dt.datetime(2026, 6, 1, 4, 0, tzinfo=MINUS_7)},
    BASE | {"temperature_c": 12, "salinity": 0, "ph": 14},  # ints, range ends
    BASE | {"temperature_c": -2.0, "salinity": 50.0, "ph": 0.0},
    BASE | {"alkalinity_umol_kg": 2150},
    BASE | {"alkalinity_mg_l_caco3": 110.5},
    {"observed_at": "2026-06-01T05:00:00Z", "temperature_c": 11.8},
    {"observed_at": "2026-06-01T05:00:00Z", "salinity": 31.0, "ph_scale": "total"},
    BASE | {"reading_id": None, "alkalinity_umol_kg": None, "ph_scale": "seawater"},
]

# Items it leaves to the model: some the model takes (coercions), most it refuses.
UNUSUAL = [
    BASE | {"ph": "7.8"},
    BASE | {"temperature_c": True},
    BASE | {"temperature_c": float("nan")},
    BASE | {"salinity": float("inf")},
    BASE | {"ph": 10**400},
    BASE | {"ph": 14.01},
    BASE | {"alkalinity_umol_kg": 99.9},
    BASE | {"reading_id": ""},
    BASE | {"reading_id": "x" * 129},
    BASE | {"reading_id": 5},
    BASE | {"ph_scale": "NBS"},
    BASE | {"ph_scale": ["nbs"]},
    BASE | {"observed_at": "2026-06-01T05:00:00"},
    BASE | {"observed_at": "2026-06-01 05:00:00Z"},
    BASE | {"observed_at": "2026-06-01T12:10:00.000001Z"},  # just beyond the 10 minutes
    BASE | {"observed_at": "2026-02-29T05:00:00Z"},
    BASE | {"observed_at": "\u0662\u0660\u0662\u0666-06-01T05:00:00Z"},  # Arabic-Indic digits
    BASE | {"observed_at": 1780000000},
    BASE | {"observed_at": dt.datetime(2026, 6, 1, 4, 0)},
    BASE | {"colour": "blue"},
    BASE | {"alkalinity_umol_kg": 2100.0, "alkalinity_mg_l_caco3": 100.0},
    BASE | {"ph_scale": None},
    {"observed_at": "2026-06-01T05:00:00Z"},
    {
        "observed_at": "2026-06-01T05:00:00Z",
        "ph": 7.7,
        "ph_scale": "nbs",
        "alkalinity_mg_l_caco3": 100.0,
    },
    "not an object",
    [BASE],
]


def _values(reading: Any) -> tuple[Any, ...]:
    return tuple(getattr(reading, name) for name in FIELDS)


def _same(checked: Any, expected: Any) -> None:
    if isinstance(expected, list):  # the model's sentences
        assert checked == expected
        return
    assert not isinstance(checked, list)
    assert _values(checked) == _values(expected)
    assert [type(v) for v in _values(checked)] == [type(v) for v in _values(expected)]
    assert checked.observed_at.utcoffset() == dt.timedelta(0)


@pytest.mark.parametrize("item", PLAIN, ids=range(len(PLAIN)))
def test_plain_items_pass_without_the_model_with_its_values(item):
    (checked,) = validate_readings([item], now=NOW)
    assert isinstance(checked, CheckedReading)
    _same(checked, validate_reading(item, now=NOW))


@pytest.mark.parametrize("item", UNUSUAL, ids=range(len(UNUSUAL)))
def test_unusual_items_get_the_models_answer(item):
    (checked,) = validate_readings([item], now=NOW)
    assert not isinstance(checked, CheckedReading)
    _same(checked, validate_reading(item, now=NOW))


def test_a_mixed_list_gets_each_items_own_answer_in_order():
    items = [*PLAIN, *UNUSUAL, *PLAIN[:3]]
    answers = validate_readings(items, now=NOW)
    assert len(answers) == len(items)
    for item, checked in zip(items, answers, strict=True):
        _same(checked, validate_reading(item, now=NOW))
