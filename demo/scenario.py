"""The demo hatchery: an invented site, its stations and its tanks.

Everything here is made up for the demo. The place, the hatchery and the numbers
(the alkalinity-salinity line, the heater set-point, the header dose) are invented,
chosen only to be plausible for a temperate coastal shellfish hatchery. None of it
is a measurement and none of it may be used as a check value in a test of the
chemistry.

The dictionaries use the API's field names, so the demo loader can pass them
through the same create schemas and data-access functions as ``POST`` requests.
"""

from __future__ import annotations

from typing import Any

SITE: dict[str, Any] = {
    "id": "orrowen-bay",
    "name": "Orrowen Bay Hatchery (demo)",
    # A Pacific coast time zone: coastal upwelling is a fact of life there.
    "timezone": "America/Los_Angeles",
    "carbonic_constants": "lueker2000",
    "atmospheric_xco2_ppm": 420.0,
}

# Invented for the demo: total alkalinity (umol/kg) = slope * salinity + intercept.
INTAKE_ALKALINITY_LINE: dict[str, float] = {"slope": 48.0, "intercept": 640.0, "residual_sd": 8.0}

# The treated-water header: intake water dosed with soda ash, then heated.
HEADER_CHEMICAL = "sodium_carbonate"
HEADER_DOSE_MG_PER_L = 10.0
HEADER_TEMPERATURE_C = 24.0

INTAKE_STATION_ID = "bay-intake"
TREATED_STATION_ID = "warm-header"


def station_definitions(*, header_alkalinity_added: float) -> list[dict[str, Any]]:
    """The demo's stations, in the API's create shape.

    ``header_alkalinity_added`` (umol/kg) is what the header's soda-ash dose adds
    to alkalinity; the header's alkalinity line is the intake line moved up by it,
    so the service derives the header chemistry the way the water was made.
    """
    header_line = dict(INTAKE_ALKALINITY_LINE)
    header_line["intercept"] = round(header_line["intercept"] + header_alkalinity_added, 1)
    return [
        {
            "id": INTAKE_STATION_ID,
            "name": "Bay intake, after the sand filter",
            "role": "intake",
            "alkalinity": {"mode": "salinity_line", **INTAKE_ALKALINITY_LINE},
            "ph_uncertainty": 0.05,
        },
        {
            "id": TREATED_STATION_ID,
            "name": "Warm header (soda ash, heated)",
            "role": "treated",
            "alkalinity": {"mode": "salinity_line", **header_line},
            "ph_uncertainty": 0.05,
        },
    ]


TANKS: list[dict[str, Any]] = [
    {
        "id": "larvae-1",
        "name": "Larval tank 1",
        "source_station_id": TREATED_STATION_ID,
        "stage": "larvae",
        "volume_l": 2000.0,
        "culture_temperature_c": 24.0,
    },
    {
        "id": "larvae-2",
        "name": "Larval tank 2",
        "source_station_id": TREATED_STATION_ID,
        "stage": "larvae",
        "volume_l": 2000.0,
        "culture_temperature_c": 23.0,
    },
    {
        # Fed from the intake through its own small header, dosed by hand.
        "id": "larvae-3",
        "name": "Larval tank 3 (own header)",
        "source_station_id": INTAKE_STATION_ID,
        "stage": "larvae",
        "volume_l": 1200.0,
        "culture_temperature_c": 25.0,
        "treatment": {"chemical": "sodium_carbonate", "dose_mg_per_l": 8.0},
    },
    {
        "id": "nursery-1",
        "name": "Nursery upweller",
        "source_station_id": INTAKE_STATION_ID,
        "stage": "nursery",
        "volume_l": 6000.0,
        "culture_temperature_c": 18.0,
    },
]

# Who gets the demo's alert mail: an address under a reserved example domain (RFC 2606).
ALERT_RECIPIENTS: list[str] = ["manager@orrowen-bay.example"]

ADMIN_KEY_LABEL = "demo admin"
VIEWER_KEY_LABEL = "demo viewer"
