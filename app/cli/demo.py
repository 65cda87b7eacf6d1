"""``spatline demo``: the invented demo hatchery with a week of simulated readings.

The demo goes through the same doors as real data: the scenario is validated by the
API's create schemas and stored by the sites data-access functions, and the readings
go through ``ingest_readings``, the one code path of the API and the CSV importer.

The first run also records the intake's bottle samples (through the same path as
``POST .../lab-samples``, so the pH check and its drift alert are judged) and the
larval batches. Every run ends with one alert sweep, so the silent-sensor and reminder
state is current when the service starts.

Running it again keeps what is stored and only adds: the site, stations, tanks,
samples and batches are left as they are (a message says so), the readings since the
last run are simulated and stored (nothing twice), and a fresh pair of admin and
viewer keys replaces the previous demo pair.
"""

from __future__ import annotations

import argparse
import datetime as dt
import sys
from collections.abc import Sequence
from typing import TYPE_CHECKING, Any

if TYPE_CHECKING:
    from sqlalchemy.orm import Session

    from app.settings import Settings
    from app.sites.models import Site, Station
    from demo.simulator import DemoWeek

# Kept equal to demo.simulator.DEFAULT_SEED (tests/test_demo.py checks), so that the
# parser is built without importing the chemistry and the database layers.
DEFAULT_SEED = 20260601
# Readings are handed to the ingest in batches of the size a logger might post.
BATCH_SIZE = 5000
DEVICE_LABEL = "demo logger"
DEFAULT_PORT = 8000


def register(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "demo",
        help="load the invented demo hatchery with a week of simulated readings",
        description=(
            "Migrate the database, create the demo hatchery (an invented site with an intake, "
            "a treated header, three larval tanks and a nursery tank), load a week of "
            "simulated 5-minute readings ending now with bottle samples and larval batches, "
            "and print an admin and a viewer key. "
            "Run again, it keeps what is stored, adds the readings since the last run and "
            "replaces the demo keys."
        ),
    )
    parser.add_argument(
        "--seed",
        type=int,
        default=DEFAULT_SEED,
        help="seed of the simulated noise (default %(default)s)",
    )
    parser.add_argument(
        "--port",
        type=int,
        default=DEFAULT_PORT,
        help="the port you will serve on, for the addresses printed (default %(default)s)",
    )
    parser.set_defaults(handler=_demo)


def _demo(args: argparse.Namespace) -> int:
    from app import migrate
    from app.cli.server import load_settings

    settings = load_settings()
    migrate.upgrade(settings)
    summary = load_demo(settings=settings, seed=args.seed)
    for line in summary:
        print(line)
    for line in serve_hint(port=args.port, public_url=settings.public_url):
        print(line)
    return 0


def serve_hint(*, port: int, public_url: str) -> list[str]:
    """Where the demo will answer, and a word on mail links when they point elsewhere."""
    local = f"http://127.0.0.1:{port}"
    lines = [
        f"Serve with `spatline serve --port {port}` (`make demo PORT={port}` does it): "
        f"{local}, API docs at {local}/docs."
    ]
    if public_url.rstrip("/") != local:
        lines.append(
            f"Links in alert mail use SPATLINE_PUBLIC_URL ({public_url}); set it to {local} "
            "(or the address readers' browsers reach) so they open this server."
        )
    return lines


def load_demo(
    *, settings: Settings, seed: int = DEFAULT_SEED, now: dt.datetime | None = None
) -> list[str]:
    """Create or top up the demo hatchery; returns the lines to print (keys included).

    The database must be migrated. Everything is stored in one transaction.
    """
    from app.db import make_engine, make_sessionmaker
    from demo import scenario, simulator

    now = dt.datetime.now(dt.UTC) if now is None else now
    week = simulator.simulate_week(end=now, seed=seed, timezone=scenario.SITE["timezone"])
    engine = make_engine(settings)
    try:
        with make_sessionmaker(engine)() as session:
            lines = _load(session, week=week, now=now)
            session.commit()
    finally:
        engine.dispose()
    return lines


def _load(session: Session, *, week: DemoWeek, now: dt.datetime) -> list[str]:
    from app.sites import service
    from app.sites.schemas import SiteCreate, StationCreate, TankCreate
    from demo import scenario

    site_id = scenario.SITE["id"]
    site = service.get_site(session=session, site_id=site_id)
    lines: list[str] = []
    created = site is None
    if created:
        site = service.create_site(session=session, data=SiteCreate(**scenario.SITE))
        stations = [
            service.create_station(session=session, site=site, data=StationCreate(**definition))
            for definition in scenario.station_definitions(
                header_alkalinity_added=week.header_alkalinity_added
            )
        ]
        for definition in scenario.TANKS:
            service.create_tank(session=session, site=site, data=TankCreate(**definition))
        _address_default_rules(session, site_id=site.id)
        devices = {
            station.id: service.create_device(session=session, station=station, label=DEVICE_LABEL)
            for station in stations
        }
        lines.append(
            f"Created the demo hatchery {site.name!r} (site {site.id}): "
            f"{len(stations)} stations, {len(scenario.TANKS)} tanks."
        )
        device_keys = {station_id: plaintext for station_id, (_, plaintext) in devices.items()}
        device_ids = {station_id: device.id for station_id, (device, _) in devices.items()}
    else:
        lines.append(
            f"The demo site {site_id!r} already exists: its stations and tanks are kept as "
            "they are; adding the readings since the last run."
        )
        device_keys = {}
        device_ids = {
            station.id: _demo_device_id(session, station)
            for station in service.list_stations(session=session, site_id=site_id)
        }

    for station_id, series in week.stations.items():
        station = service.get_station(session=session, site_id=site_id, station_id=station_id)
        source = device_ids.get(station_id)
        if station is None or source is None:
            lines.append(f"Station {site_id}/{station_id} or its demo logger is gone; skipped.")
            continue
        accepted, duplicates, rejected = _ingest(
            session, station=station, source=source, readings=series.readings(), now=now
        )
        lines.append(
            f"  {site_id}/{station_id}: {_count(accepted, 'reading')} stored"
            + (f", {duplicates} already there" if duplicates else "")
            + (f", {_count(rejected, 'reading')} rejected" if rejected else "")
            + "."
        )

    if created:
        lines.extend(_samples_and_batches(session, site=site, week=week, now=now))
    lines.append(_sweep(session, now=now))
    lines.extend(_fresh_keys(session))
    if device_keys:
        intake_key = device_keys.get(scenario.INTAKE_STATION_ID)
        lines.append(f"  device key of {site_id}/{scenario.INTAKE_STATION_ID}: {intake_key}")
    lines.extend(
        [
            "Keys are shown only this once; store them now.",
            "The readings and advice support, and do not replace, the operator's judgement, "
            "local regulations and licensed practice.",
        ]
    )
    return lines


def _address_default_rules(session: Session, *, site_id: str) -> None:
    """Send the tanks' default alert rules to the demo manager's (example) address."""
    from app.alerts.rules import list_rules, update_rule
    from app.alerts.schemas import AlertRuleUpdate
    from demo import scenario

    recipients = AlertRuleUpdate(recipients=scenario.ALERT_RECIPIENTS)
    for rule in list_rules(session=session, site_id=site_id):
        update_rule(session=session, rule=rule, data=recipients)


def _samples_and_batches(
    session: Session, *, site: Site, week: DemoWeek, now: dt.datetime
) -> list[str]:
    """The intake's bottle samples and the larval batches of the scenario.

    Samples go through ``record_sample``, the path of the API, so each is checked against
    the pH sensor as it is stored; they come after the readings they are compared with.
    """
    from app.batches.schemas import BatchCreate
    from app.batches.service import create_batch
    from app.samples.drift import record_sample
    from app.samples.schemas import LabSampleCreate
    from app.sites import service
    from demo import scenario

    intake = service.get_station(
        session=session, site_id=site.id, station_id=scenario.INTAKE_STATION_ID
    )
    for sample in week.intake_samples:
        record_sample(
            session=session,
            site=site,
            station=intake,
            data=LabSampleCreate(**sample),
            now=now,
        )
    for definition in scenario.BATCHES:
        fields = {k: v for k, v in definition.items() if k != "started_hours_before_end"}
        started_at = week.end - dt.timedelta(hours=definition["started_hours_before_end"])
        create_batch(session=session, site=site, data=BatchCreate(started_at=started_at, **fields))
    return [
        f"  {site.id}/{scenario.INTAKE_STATION_ID}: {len(week.intake_samples)} bottle samples "
        "(alkalinity and pH) recorded.",
        f"  {len(scenario.BATCHES)} larval batches: "
        + ", ".join(f"{b['id']} in {b['tank_id']}" for b in scenario.BATCHES)
        + ".",
    ]


def _sweep(session: Session, *, now: dt.datetime) -> str:
    """One pass of the worker's alert sweep (silent sensors, reminders) at ``now``."""
    from sqlalchemy import select

    from app.alerts import state_machine
    from app.alerts.evaluation import sweep
    from app.alerts.models import Alert

    sweep(session=session, now=now)
    open_states = [s.value for s in state_machine.OPEN_ALERT_STATES]
    open_count = len(session.scalars(select(Alert.id).where(Alert.state.in_(open_states))).all())
    return (f"Alert sweep done: {_count(open_count, 'alert')} open now "
            "(see the web page or /alerts).")


def _demo_device_id(session: Session, station: Station) -> str | None:
    """The station's oldest unrevoked device: the demo logger that posted its readings."""
    from sqlalchemy import select

    from app.sites.models import Device

    return session.scalars(
        select(Device.id)
        .where(Device.station_pk == station.pk, Device.revoked_at.is_(None))
        .order_by(Device.created_at, Device.id)
        .limit(1)
    ).first()


def _ingest(
    session: Session,
    *,
    station: Station,
    source: str,
    readings: Sequence[dict[str, Any]],
    now: dt.datetime,
) -> tuple[int, int, int]:
    from sqlalchemy import func, select

    from app.readings.ingest import ingest_readings
    from app.readings.models import Reading

    latest = session.scalar(
        select(func.max(Reading.observed_at)).where(
            Reading.station_pk == station.pk, Reading.source == source
        )
    )
    if latest is not None:
        # Only the readings after the last run: the earlier simulated week is already
        # stored, and re-simulated values for the same times would differ.
        latest = latest if latest.tzinfo else latest.replace(tzinfo=dt.UTC)
        readings = [r for r in readings if r["observed_at"] > latest]
    accepted = duplicates = rejected = 0
    for start in range(0, len(readings), BATCH_SIZE):
        result = ingest_readings(
            session=session,
            station=station,
            source=source,
            items=readings[start : start + BATCH_SIZE],
            now=now,
            index_offset=start,
        )
        accepted += result.accepted
        duplicates += result.duplicates
        rejected += len(result.rejected)
        for item in result.rejected[:3]:
            print(f"  rejected reading {item.index}: {'; '.join(item.errors)}", file=sys.stderr)
    return accepted, duplicates, rejected


def _fresh_keys(session: Session) -> list[str]:
    """Revoke the previous demo admin and viewer keys and create a new pair."""
    from sqlalchemy import select

    from app.auth import keys
    from app.auth.models import ApiKey
    from demo import scenario

    revoked = 0
    for label in (scenario.ADMIN_KEY_LABEL, scenario.VIEWER_KEY_LABEL):
        previous = session.scalars(
            select(ApiKey).where(ApiKey.label == label, ApiKey.revoked_at.is_(None))
        ).all()
        for api_key in previous:
            keys.revoke_key(session=session, key_id=api_key.id)
            revoked += 1
    _, admin_key = keys.create_key(session=session, role="admin", label=scenario.ADMIN_KEY_LABEL)
    _, viewer_key = keys.create_key(
        session=session, role="viewer", label=scenario.VIEWER_KEY_LABEL
    )
    lines = [
        f"  admin key (configure): {admin_key}",
        f"  viewer key (read):     {viewer_key}",
    ]
    if revoked:
        lines.insert(0, f"Revoked the {revoked} demo keys of the previous run.")
    return lines


def _count(n: int, noun: str) -> str:
    """"1 reading", "2 readings"."""
    return f"{n} {noun}" if n == 1 else f"{n} {noun}s"
