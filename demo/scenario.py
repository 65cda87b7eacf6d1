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

# Who gets the demo's alert mail: invented people at a reserved example domain (RFC 2606).
ALERT_RECIPIENTS: list[str] = [
    "water-quality@orrowen-bay.example",
    "night-shift@orrowen-bay.example",
]

# Larval batches, placed relative to the end of the simulated week (hours before it). The
# first was stocked into the own-header tank before the mid-week upwelling, so its record
# shows the hours its tank spent below the floor; the second was stocked after it.
BATCHES: list[dict[str, Any]] = [
    {
        "id": "oyster-run-a",
        "species": "Pacific oyster (Crassostrea gigas)",
        "tank_id": "larvae-3",
        "started_hours_before_end": 120.0,
        "count_start": 12_000_000,
        "notes": "Invented demo batch: stocked before the upwelling.",
    },
    {
        "id": "oyster-run-b",
        "species": "Pacific oyster (Crassostrea gigas)",
        "tank_id": "larvae-1",
        "started_hours_before_end": 30.0,
        "count_start": 15_000_000,
        "notes": "Invented demo batch: stocked after the upwelling had passed.",
    },
]

# Bottle samples of the intake, one a day at about 09:00 local time, analysed for total
# alkalinity and pH (total scale) at the lab's temperature. The lab's scatter is invented.
SAMPLE_LOCAL_HOUR = 9
SAMPLE_LAB_TEMPERATURE_C = 25.0
SAMPLE_ALKALINITY_SD_UMOL_KG = 4.0
SAMPLE_PH_SD = 0.004
SAMPLE_METHOD = "demo lab: open-cell titration for alkalinity, dye pH at 25 C"

ADMIN_KEY_LABEL = "demo admin"
VIEWER_KEY_LABEL = "demo viewer"
