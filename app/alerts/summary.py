"""The daily summary mail: the previous local day's figures, once per site and day.

It is written at the site's ``daily_summary_hour`` (site-local) or at the first worker
cycle after it. A ``daily_summaries`` row per (site, local date), unique, makes sure that
several workers write it once.
"""

from __future__ import annotations

import datetime as dt
import logging
from typing import Any
from zoneinfo import ZoneInfo

from sqlalchemy import func, select
from sqlalchemy.exc import IntegrityError
from sqlalchemy.orm import Session

import chemistry
from app.alerts import advice as advice_module
from app.alerts.mail import PUBLIC_URL_TOKEN, text_to_html, write_outbox
from app.alerts.models import Alert, AlertRule, DailySummaryRecord
from app.readings.models import Reading
from app.sites.models import Site, Station, Tank

logger = logging.getLogger(__name__)

QC_FAIL = 4
SUMMARY_VARIABLES = (
    ("omega_aragonite", "omega aragonite", 2),
    ("ph_total", "pH total", 3),
    ("pco2_uatm", "pCO2 (uatm)", 0),
    ("temperature_c", "temperature (°C)", 1),
    ("salinity", "salinity", 2),
)


def local_day_bounds(day: dt.date, timezone: str) -> tuple[dt.datetime, dt.datetime]:
    """UTC start (inclusive) and end (exclusive) of a site-local calendar day."""
    zone = ZoneInfo(timezone)
    start = dt.datetime.combine(day, dt.time(0), tzinfo=zone)
    end = dt.datetime.combine(day + dt.timedelta(days=1), dt.time(0), tzinfo=zone)
    return start.astimezone(dt.UTC), end.astimezone(dt.UTC)


def station_day_figures(
    *, session: Session, station_pk: int, start: dt.datetime, end: dt.datetime
) -> dict[str, Any]:
    """Count, and minimum / mean / maximum of each variable, over readings that did not fail QC."""
    columns = []
    for name, _label, _digits in SUMMARY_VARIABLES:
        column = getattr(Reading, name)
        columns += [func.min(column), func.avg(column), func.max(column)]
    row = session.execute(
        select(func.count(Reading.id), *columns).where(
            Reading.station_pk == station_pk,
            Reading.observed_at >= start,
            Reading.observed_at < end,
            Reading.qc_overall != QC_FAIL,
        )
    ).one()
    figures: dict[str, Any] = {"readings": int(row[0])}
    for i, (name, _label, _digits) in enumerate(SUMMARY_VARIABLES):
        low, mean, high = row[1 + 3 * i : 4 + 3 * i]
        figures[name] = (
            None if low is None else {"min": float(low), "mean": float(mean), "max": float(high)}
        )
    return figures


def compose_summary(
    *, session: Session, site: Site, day: dt.date
) -> tuple[str, str, dict[str, Any]]:
    start, end = local_day_bounds(day, site.timezone)
    lines = [f"Site: {site.name} ({site.id})", f"Day: {day.isoformat()} ({site.timezone})", ""]
    details: dict[str, Any] = {"day": day.isoformat(), "stations": {}, "tanks": {}}
    stations = session.scalars(
        select(Station).where(Station.site_id == site.id).order_by(Station.id)
    )
    for station in stations:
        figures = station_day_figures(session=session, station_pk=station.pk, start=start, end=end)
        details["stations"][station.id] = figures
        lines.append(f"Station {station.name} ({station.id}): {figures['readings']} good readings")
        for name, label, digits in SUMMARY_VARIABLES:
            if figures[name] is not None:
                f = figures[name]
                lines.append(
                    f"  {label}: min {f['min']:.{digits}f}, mean {f['mean']:.{digits}f}, "
                    f"max {f['max']:.{digits}f}"
                )
    lines.append("")
    tanks = session.scalars(select(Tank).where(Tank.site_id == site.id).order_by(Tank.id))
    for tank in tanks:
        try:
            advice = advice_module.tank_advice(session=session, site=site, tank=tank)
        except chemistry.ChemistryInputError as error:
            logger.warning("tank advice for %s failed in the daily summary: %s", tank.id, error)
            advice = None
        if advice is None:
            lines.append(f"Tank {tank.name} ({tank.id}): no good reading at its source station.")
            continue
        water = advice["in_tank"]
        details["tanks"][tank.id] = {
            "omega_aragonite": water["omega_aragonite"],
            "omega_aragonite_uncertainty": water["omega_aragonite_uncertainty"],
            "probability_below_floor": water["probability_below_floor"],
            "basis": advice["in_tank_basis"],
            "untreated_omega_aragonite": advice["untreated"]["omega_aragonite"],
        }
        treated_words = advice_module.IN_TANK_BASIS_WORDS[advice["in_tank_basis"]]
        untreated_text = (
            f"; untreated water {advice['untreated']['omega_aragonite']:.2f}"
            if advice["treatment"] is not None
            else ""
        )
        lines.append(
            f"Tank {tank.name} ({tank.id}), fed from {advice['source']}, now: predicted omega "
            f"aragonite {water['omega_aragonite']:.2f} ± {water['omega_aragonite_uncertainty']:.2f}"
            f" ({treated_words}) at {advice['culture_temperature_c']:g} °C "
            f"(floor {advice['omega_floor']:g}){untreated_text}."
        )
        for warning in advice["warnings"]:
            lines.append(f"  Warning: {warning}")
        lines.append(f"  {advice['dose']['text']}")
    raised = session.scalar(
        select(func.count(Alert.id)).where(
            Alert.site_id == site.id, Alert.raised_at >= start, Alert.raised_at < end
        )
    )
    details["alerts_raised"] = int(raised or 0)
    lines += [
        "",
        f"Alerts raised that day: {int(raised or 0)}",
        f"Dashboard: {PUBLIC_URL_TOKEN}/sites/{site.id}",
        f"Day page: {PUBLIC_URL_TOKEN}/sites/{site.id}/days/{day.isoformat()}",
        "",
        chemistry.DOSING_CAUTION,
    ]
    return f"[{site.name}] Daily summary for {day.isoformat()}", "\n".join(lines) + "\n", details


def write_daily_summaries(*, session: Session, now: dt.datetime) -> int:
    """Write each site's summary of yesterday once its local summary hour has come."""
    written = 0
    for site in session.scalars(select(Site).order_by(Site.id)).all():
        local_now = now.astimezone(ZoneInfo(site.timezone))
        if local_now.hour < site.daily_summary_hour:
            continue
        today = local_now.date()
        done = session.scalar(
            select(DailySummaryRecord.id).where(
                DailySummaryRecord.site_id == site.id, DailySummaryRecord.local_date == today
            )
        )
        if done is not None:
            continue
        recipients = sorted(
            {
                address
                for rule in session.scalars(
                    select(AlertRule).where(
                        AlertRule.site_id == site.id, AlertRule.deleted_at.is_(None)
                    )
                )
                for address in rule.recipients or []
            }
        )
        day = today - dt.timedelta(days=1)
        subject, text, details = compose_summary(session=session, site=site, day=day)
        try:
            with session.begin_nested():
                record = DailySummaryRecord(
                    site_id=site.id, local_date=today, details=details, created_at=now
                )
                session.add(record)
                session.flush()
                row = write_outbox(
                    session=session,
                    site_id=site.id,
                    alert_id=None,
                    kind="daily_summary",
                    recipients=recipients,
                    subject=subject,
                    body_text=text,
                    body_html=text_to_html(subject, text),
                    message_key=day.isoformat(),
                    now=now,
                )
                record.outbox_id = row.id
                session.flush()
        except IntegrityError:
            # Another worker wrote it first.
            continue
        written += 1
    return written
