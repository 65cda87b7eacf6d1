"""A week of simulated 5-minute sensor readings for the demo hatchery.

The water is described by what drives it (temperature, salinity, pCO2 and an
alkalinity-salinity line) and the rest is computed with the project's chemistry
engine, so that every simulated reading is self-consistent: the pH a sensor
reports is the pH of that water, read on the NBS scale like a glass electrode,
with a little noise.

The week holds three things a hatchery manager sees on a real coast:

- a day-night cycle: the water warms in the afternoon, and photosynthesis draws
  CO2 down by day while respiration puts it back at night;
- an upwelling event, about two days of cold, CO2-rich, low-saturation water
  (in-situ aragonite saturation well below 1.5) in the middle of the week, that has
  passed well before the week ends, so its alerts are raised and cleared;
- a day of rain that freshens the intake by several salinity units;
- a milder upwelling pulse on the last day, still under way when the week ends, so
  the demo opens with something worth reading: the most exposed tank below its floor
  while the others stay above.

Everything is invented for the demo; nothing here is a measurement. All
functions are pure: given the same end time and seed they return the same
readings, and nothing touches a database.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from datetime import UTC, datetime, timedelta
from typing import Any
from zoneinfo import ZoneInfo

import numpy as np

import chemistry
from demo import scenario

STEP = timedelta(minutes=5)
DAYS = 7
DEFAULT_SEED = 20260601

# Invented baseline of the bay in early summer.
BASE_TEMPERATURE_C = 13.0
DIURNAL_TEMPERATURE_AMPLITUDE_C = 0.5
WARMEST_LOCAL_HOUR = 15.0
BASE_SALINITY = 31.6
BASE_PCO2_UATM = 350.0
DIURNAL_PCO2_AMPLITUDE_UATM = 50.0
# Respiration outruns photosynthesis through the night: pCO2 peaks about dawn.
HIGHEST_PCO2_LOCAL_HOUR = 6.0

# Upwelled water: colder, a little saltier, rich in respired CO2.
UPWELLING_COOLING_C = 3.6
UPWELLING_SALINITY_RISE = 0.5
UPWELLING_PCO2_UATM = 1100.0
# The last day's pulse: a weaker upwelling, enough to take the most exposed tank (the
# unbuffered nursery, fed straight from the intake) below its floor.
LATE_PULSE_COOLING_C = 1.5
LATE_PULSE_PCO2_UATM = 620.0
# Rain: fresher and slightly cooler; runoff brings some CO2 with it.
RAIN_FRESHENING = 5.0
RAIN_COOLING_C = 0.6
RAIN_PCO2_RISE_UATM = 20.0

# Sensor noise (standard deviations), of the order of field instruments.
TEMPERATURE_NOISE_C = 0.02
SALINITY_NOISE = 0.03
PH_NOISE = 0.01
HEATER_WANDER_C = 0.15


@dataclass(frozen=True)
class Episode:
    """A stretch of unusual water, placed relative to the end of the week.

    The effect ramps in over ``ramp_hours`` (a raised cosine), holds, then ramps
    out so that it has ended ``duration_hours`` after it began.
    """

    name: str
    starts_hours_before_end: float
    duration_hours: float
    ramp_hours: float

    def weight(self, hours_before_end: np.ndarray) -> np.ndarray:
        """Strength of the episode, 0 to 1, at the given times."""
        since_start = self.starts_hours_before_end - np.asarray(hours_before_end, dtype=float)
        until_stop = self.duration_hours - since_start
        ramp_in = _raised_cosine(since_start / self.ramp_hours)
        ramp_out = _raised_cosine(until_stop / self.ramp_hours)
        return np.minimum(ramp_in, ramp_out)

    def full_strength(self, end: datetime) -> tuple[datetime, datetime]:
        """The window (start, stop) in which the episode is at full strength."""
        start = end - timedelta(hours=self.starts_hours_before_end - self.ramp_hours)
        stop = end - timedelta(
            hours=self.starts_hours_before_end - self.duration_hours + self.ramp_hours
        )
        return start, stop

    def whole(self, end: datetime) -> tuple[datetime, datetime]:
        """The window (start, stop) in which the episode has any effect."""
        start = end - timedelta(hours=self.starts_hours_before_end)
        stop = start + timedelta(hours=self.duration_hours)
        return start, stop


# The upwelling comes after the rain and has passed almost two days before the week ends:
# long enough for the tanks' alerts to raise, and for the water to recover above their
# clear levels so the alerts clear.
UPWELLING = Episode("upwelling", starts_hours_before_end=100.0, duration_hours=56.0, ramp_hours=8.0)
RAIN = Episode("rain", starts_hours_before_end=150.0, duration_hours=24.0, ramp_hours=4.0)
# Began in the last night and still under way at the end of the week.
LATE_PULSE = Episode(
    "late pulse", starts_hours_before_end=14.0, duration_hours=30.0, ramp_hours=4.0
)


def _raised_cosine(fraction: np.ndarray) -> np.ndarray:
    clipped = np.clip(fraction, 0.0, 1.0)
    return 0.5 - 0.5 * np.cos(np.pi * clipped)


@dataclass(frozen=True)
class StationSeries:
    """One station's simulated week: what its sensors report and the true water."""

    station_id: str
    observed_at: list[datetime]
    temperature_c: np.ndarray
    salinity: np.ndarray
    ph_nbs: np.ndarray
    alkalinity: np.ndarray
    pco2_uatm: np.ndarray
    omega_aragonite: np.ndarray

    def readings(self) -> list[dict[str, Any]]:
        """Reading dicts in the API's item shape, rounded like a logger would."""
        return [
            {
                "observed_at": observed_at,
                "temperature_c": round(float(temperature), 2),
                "salinity": round(float(salinity), 2),
                "ph": round(float(ph), 3),
                "ph_scale": "nbs",
            }
            for observed_at, temperature, salinity, ph in zip(
                self.observed_at, self.temperature_c, self.salinity, self.ph_nbs, strict=True
            )
        ]


@dataclass(frozen=True)
class DemoWeek:
    """The simulated week of every station, what the header dose adds, and the intake's
    bottle samples (in the API's lab-sample shape)."""

    end: datetime
    stations: dict[str, StationSeries] = field(default_factory=dict)
    header_alkalinity_added: float = 0.0
    intake_samples: list[dict[str, Any]] = field(default_factory=list)


def week_end(now: datetime | None = None) -> datetime:
    """The last 5-minute mark at or before ``now`` (UTC), where the week ends."""
    now = datetime.now(UTC) if now is None else now.astimezone(UTC)
    floored = now.replace(second=0, microsecond=0)
    return floored - timedelta(minutes=floored.minute % 5)


def timeline(end: datetime, *, days: int = DAYS, step: timedelta = STEP) -> list[datetime]:
    """Times (UTC) of a ``days``-long series at ``step`` that ends exactly at ``end``."""
    count = int(timedelta(days=days) / step)
    return [end - (count - 1 - i) * step for i in range(count)]


def local_hours(times: list[datetime], timezone: str) -> np.ndarray:
    """Hour of the site's local day (0-24, fractional) of each time."""
    zone = ZoneInfo(timezone)
    local = [t.astimezone(zone) for t in times]
    return np.array([t.hour + t.minute / 60.0 + t.second / 3600.0 for t in local])


def hours_before(times: list[datetime], end: datetime) -> np.ndarray:
    """Hours from each time to ``end``."""
    return np.array([(end - t).total_seconds() / 3600.0 for t in times])


def _wander(rng: np.random.Generator, size: int, sd: float, memory: float = 0.98) -> np.ndarray:
    """A slow random wander (a first-order autoregressive series) with standard deviation ``sd``."""
    innovations = rng.normal(0.0, sd * np.sqrt(1.0 - memory**2), size)
    series = np.empty(size)
    series[0] = rng.normal(0.0, sd)
    for i in range(1, size):
        series[i] = memory * series[i - 1] + innovations[i]
    return series


def intake_drivers(
    times: list[datetime], *, end: datetime, timezone: str, rng: np.random.Generator
) -> dict[str, np.ndarray]:
    """Temperature (deg C), salinity and pCO2 (uatm) of the bay water at the intake."""
    hour = local_hours(times, timezone)
    before_end = hours_before(times, end)
    upwelling = UPWELLING.weight(before_end)
    pulse = LATE_PULSE.weight(before_end)
    rain = RAIN.weight(before_end)
    size = len(times)

    daily_warmth = np.cos(2 * np.pi * (hour - WARMEST_LOCAL_HOUR) / 24.0)
    temperature = (
        BASE_TEMPERATURE_C
        + DIURNAL_TEMPERATURE_AMPLITUDE_C * daily_warmth
        - UPWELLING_COOLING_C * upwelling
        - LATE_PULSE_COOLING_C * pulse
        - RAIN_COOLING_C * rain
        + _wander(rng, size, 0.15)
    )
    salinity = (
        BASE_SALINITY
        + UPWELLING_SALINITY_RISE * upwelling
        - RAIN_FRESHENING * rain
        + _wander(rng, size, 0.05)
    )
    daily_co2 = np.cos(2 * np.pi * (hour - HIGHEST_PCO2_LOCAL_HOUR) / 24.0)
    surface_pco2 = (
        BASE_PCO2_UATM
        + DIURNAL_PCO2_AMPLITUDE_UATM * daily_co2
        + RAIN_PCO2_RISE_UATM * rain
        + _wander(rng, size, 15.0)
    )
    # Upwelled water replaces the surface water; the day-night signal rides on top, weaker.
    pco2 = (1.0 - upwelling) * surface_pco2 + upwelling * (
        UPWELLING_PCO2_UATM + 0.5 * DIURNAL_PCO2_AMPLITUDE_UATM * daily_co2
    )
    pco2 = (1.0 - pulse) * pco2 + pulse * (
        LATE_PULSE_PCO2_UATM + 0.5 * DIURNAL_PCO2_AMPLITUDE_UATM * daily_co2
    )
    return {"temperature": temperature, "salinity": salinity, "pco2": pco2}


def alkalinity_on_line(salinity: np.ndarray, line: dict[str, float]) -> np.ndarray:
    """Total alkalinity (umol/kg) from salinity on a straight alkalinity-salinity line."""
    return line["slope"] * np.asarray(salinity, dtype=float) + line["intercept"]


def glass_electrode_ph(
    state: chemistry.CarbonateState, rng: np.random.Generator, *, noise_sd: float = PH_NOISE
) -> np.ndarray:
    """The NBS-scale pH a glass electrode in this water would show, with its noise."""
    ph_nbs = np.asarray(state.ph_nbs, dtype=float)
    return ph_nbs + rng.normal(0.0, noise_sd, ph_nbs.shape)


def bottle_samples(
    times: list[datetime],
    timezone: str,
    water: chemistry.CarbonateState,
    rng: np.random.Generator,
) -> list[dict[str, Any]]:
    """One bottle sample a day at ``scenario.SAMPLE_LOCAL_HOUR``: the true water's salinity,
    its alkalinity and its pH (total scale) at the lab's temperature, each with a lab's
    scatter. Two carbonate parameters per sample, so each checks the pH sensor."""
    zone = ZoneInfo(timezone)
    local = [t.astimezone(zone) for t in times]
    picks = [
        i
        for i, t in enumerate(local)
        if t.hour == scenario.SAMPLE_LOCAL_HOUR and t.minute == 0 and 0 < i < len(times) - 1
    ]
    salinity = np.asarray(water.salinity, dtype=float)[picks]
    in_lab = chemistry.at_temperature(
        chemistry.solve(
            temperature=np.asarray(water.temperature, dtype=float)[picks],
            salinity=salinity,
            alkalinity=np.asarray(water.alkalinity, dtype=float)[picks],
            dic=np.asarray(water.dic, dtype=float)[picks],
            carbonic=scenario.SITE["carbonic_constants"],
        ),
        scenario.SAMPLE_LAB_TEMPERATURE_C,
    )
    alkalinity = np.asarray(water.alkalinity, dtype=float)[picks] + rng.normal(
        0.0, scenario.SAMPLE_ALKALINITY_SD_UMOL_KG, len(picks)
    )
    ph_total = np.asarray(in_lab.ph_total, dtype=float) + rng.normal(
        0.0, scenario.SAMPLE_PH_SD, len(picks)
    )
    return [
        {
            "collected_at": local[i],
            "salinity": round(float(salinity[k]), 2),
            "temperature_c": scenario.SAMPLE_LAB_TEMPERATURE_C,
            "alkalinity_umol_kg": round(float(alkalinity[k]), 1),
            "ph": round(float(ph_total[k]), 4),
            "ph_scale": "total",
            "method": scenario.SAMPLE_METHOD,
            "notes": "Invented demo sample.",
        }
        for k, i in enumerate(picks)
    ]


def _series(
    station_id: str,
    times: list[datetime],
    timezone: str,
    state: chemistry.CarbonateState,
    rng: np.random.Generator,
) -> StationSeries:
    zone = ZoneInfo(timezone)
    temperature = np.asarray(state.temperature, dtype=float)
    salinity = np.asarray(state.salinity, dtype=float)
    return StationSeries(
        station_id=station_id,
        observed_at=[t.astimezone(zone) for t in times],
        temperature_c=temperature + rng.normal(0.0, TEMPERATURE_NOISE_C, temperature.shape),
        salinity=salinity + rng.normal(0.0, SALINITY_NOISE, salinity.shape),
        ph_nbs=glass_electrode_ph(state, rng),
        alkalinity=np.asarray(state.alkalinity, dtype=float),
        pco2_uatm=np.asarray(state.pco2, dtype=float),
        omega_aragonite=np.asarray(state.omega_aragonite, dtype=float),
    )


def simulate_week(
    *,
    end: datetime | None = None,
    seed: int = DEFAULT_SEED,
    timezone: str = scenario.SITE["timezone"],
) -> DemoWeek:
    """Simulate the demo hatchery's intake and treated header for the week ending at ``end``.

    Parameters
    ----------
    end : datetime, optional
        Aware time of the last reading; default the last 5-minute mark before now.
    seed : int
        Seed of the random wander and sensor noise; the same seed and end give the
        same readings.
    timezone : str
        IANA zone of the site: the day-night cycle follows local time, and the
        readings' ``observed_at`` carry the local offset.

    Returns
    -------
    DemoWeek
        ``stations`` by station id (intake and treated header), and the alkalinity
        (umol/kg) the header's soda-ash dose adds.
    """
    end = week_end() if end is None else week_end(end)
    times = timeline(end)
    # Children of one seed sequence do not depend on how many are spawned, so the fifth
    # (the lab's scatter) leaves the first four, and so the readings, as they were.
    intake_rng, header_rng, intake_sensor_rng, header_sensor_rng, lab_rng = (
        np.random.default_rng(child) for child in np.random.SeedSequence(seed).spawn(5)
    )

    drivers = intake_drivers(times, end=end, timezone=timezone, rng=intake_rng)
    intake = chemistry.solve(
        temperature=drivers["temperature"],
        salinity=drivers["salinity"],
        alkalinity=alkalinity_on_line(drivers["salinity"], scenario.INTAKE_ALKALINITY_LINE),
        pco2=drivers["pco2"],
        carbonic=scenario.SITE["carbonic_constants"],
    )

    # The header: soda ash dissolved into the intake water, then heated to the set-point.
    dosed = chemistry.add_chemical(intake, scenario.HEADER_CHEMICAL, scenario.HEADER_DOSE_MG_PER_L)
    heater = scenario.HEADER_TEMPERATURE_C + _wander(header_rng, len(times), HEATER_WANDER_C, 0.9)
    header = chemistry.at_temperature(dosed, heater)

    stations = {
        scenario.INTAKE_STATION_ID: _series(
            scenario.INTAKE_STATION_ID, times, timezone, intake, intake_sensor_rng
        ),
        scenario.TREATED_STATION_ID: _series(
            scenario.TREATED_STATION_ID, times, timezone, header, header_sensor_rng
        ),
    }
    added = float(np.mean(np.asarray(dosed.alkalinity) - np.asarray(intake.alkalinity)))
    return DemoWeek(
        end=end,
        stations=stations,
        header_alkalinity_added=added,
        intake_samples=bottle_samples(times, timezone, intake, lab_rng),
    )
