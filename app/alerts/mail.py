"""Mail content for alert notifications and daily summaries, and the outbox writes.

Bodies are fixed when the outbox row is written (what was true at that moment), except the
dashboard link, whose base URL belongs to the deployment: it is stored as
:data:`PUBLIC_URL_TOKEN` and filled in from ``settings.public_url`` when the mail is built.
"""

from __future__ import annotations

import datetime as dt
import html
from typing import Any
from zoneinfo import ZoneInfo

from sqlalchemy.orm import Session

import chemistry
from app.alerts.advice import IN_TANK_BASIS_WORDS, source_description
from app.alerts.models import Alert, AlertRule, OutboxMessage
from app.sites.models import Site, Station, Tank

PUBLIC_URL_TOKEN = "{{public_url}}"

METRIC_WORDS = {
    "tank_omega_aragonite": ("predicted omega aragonite in the tank", ""),
    "omega_aragonite": ("omega aragonite", ""),
    "ph_total": ("pH (total scale)", ""),
    "pco2_uatm": ("pCO2", " uatm"),
    "temperature_c": ("temperature", " °C"),
    "salinity": ("salinity", ""),
    "no_data": ("time without a reading", " min"),
    "qc_failed": ("QC flag", ""),
    "sensor_drift": ("size of the pH sensor's offset from the latest bottle sample", ""),
}
GENERIC_METRIC_WORDS = ("value", "")
KIND_WORDS = {"raised": "ALERT", "reminder": "STILL ACTIVE", "cleared": "CLEARED"}


def fill_public_url(text: str, public_url: str) -> str:
    return text.replace(PUBLIC_URL_TOKEN, public_url.rstrip("/"))


def _local(moment: dt.datetime | None, site: Site) -> str:
    if moment is None:
        return "-"
    local = moment.astimezone(ZoneInfo(site.timezone))
    return f"{local:%Y-%m-%d %H:%M} {local.tzname()} ({moment.astimezone(dt.UTC):%H:%M} UTC)"


def _value(metric: str, value: float | None, uncertainty: float | None = None) -> str:
    if value is None:
        return "-"
    unit = METRIC_WORDS.get(metric, GENERIC_METRIC_WORDS)[1]
    digits = 0 if metric in ("no_data", "qc_failed", "pco2_uatm") else 2
    text = f"{value:.{digits}f}"
    if uncertainty is not None:
        text += f" ± {uncertainty:.{digits or 2}f} (1 standard uncertainty)"
    return text + unit


def _drift_words(offset: float | None) -> str:
    """A signed pH offset (bottle sample minus sensor) in words."""
    if offset is None:
        return "-"
    way = "high" if offset < 0 else "low"
    return (
        f"sensor reads {way} by {abs(offset):.3f} pH "
        f"(bottle sample minus sensor: {offset:+.3f}, total scale)"
    )


def _condition(rule: AlertRule) -> str:
    words, unit = METRIC_WORDS.get(rule.metric, (rule.metric.replace("_", " "), ""))
    if rule.metric == "sensor_drift":
        return (
            f"{words} above {rule.level:g} pH (either way); clears when it is "
            f"{rule.clear_level:g} or less"
        )
    if rule.metric == "no_data":
        return f"no reading for more than {rule.level:g} minutes"
    if rule.metric == "qc_failed":
        return f"latest reading's QC flag above {rule.level:g} (failed or missing)"
    text = f"{words} {rule.direction} {rule.level:g}{unit}"
    if rule.min_probability is not None:
        text += f" with probability at least {rule.min_probability:g}"
    return text + f"; clears at {rule.clear_level:g}{unit}"


def _advice_lines(advice: dict[str, Any] | None, tank: Tank) -> list[str]:
    if advice is None:
        return [f"Tank {tank.name} ({tank.id}): no good reading at its source station yet."]
    water = advice["in_tank"]
    basis = IN_TANK_BASIS_WORDS[advice["in_tank_basis"]]
    reading = advice["reading"]
    lines = [
        f"Tank {tank.name} ({tank.id}), fed from {advice['source']}, at "
        f"{advice['culture_temperature_c']:g} °C: predicted omega aragonite "
        f"{water['omega_aragonite']:.2f} ± {water['omega_aragonite_uncertainty']:.2f} "
        f"({basis}), probability below the floor {advice['omega_floor']:g}: "
        f"{water['probability_below_floor']:.0%}; pH total {water['ph_total']:.2f}, "
        f"pCO2 {water['pco2_uatm']:.0f} uatm.",
        f"  From the reading of {reading['observed_at']:%Y-%m-%d %H:%M} UTC, "
        f"{reading['age_minutes']:.0f} minutes old.",
    ]
    if advice["treatment"] is not None:
        untreated = advice["untreated"]
        lines.append(
            f"  Untreated water (before the current treatment, "
            f"{advice['treatment']['dose_mg_per_l']:g} mg/L "
            f"{advice['treatment']['chemical'].replace('_', ' ')}): omega aragonite "
            f"{untreated['omega_aragonite']:.2f} ± {untreated['omega_aragonite_uncertainty']:.2f}."
        )
    for warning in advice.get("warnings", []):
        lines.append(f"  Warning: {warning}")
    lines.append(f"  {advice['dose']['text']}")
    aerated = advice["aeration"]["result"]
    lines.append(
        f"  Aeration of the untreated water to equilibrium with air "
        f"({advice['aeration']['atmospheric_xco2_ppm']:g} ppm): omega aragonite "
        f"{aerated['omega_aragonite']:.2f}, pH total {aerated['ph_total']:.2f}."
    )
    return lines


def compose_alert_message(
    *,
    site: Site,
    rule: AlertRule,
    alert: Alert,
    kind: str,
    station: Station,
    tank: Tank | None,
    tank_advice: list[tuple[Tank, dict[str, Any] | None]],
    at: dt.datetime,
) -> tuple[str, str, str]:
    """Subject, plain text and HTML of one alert notification."""
    place = f"tank {tank.name}" if tank is not None else f"station {station.name}"
    words = METRIC_WORDS.get(rule.metric, (rule.metric.replace("_", " "), ""))[0]
    subject = f"[{site.name}] {KIND_WORDS[kind]}: {words}, {place}"
    lines = [
        f"Site: {site.name} ({site.id})",
        f"{'Tank' if tank is not None else 'Station'}: {place.split(' ', 1)[1]}"
        + (f", fed from {source_description(station)}" if tank is not None else ""),
        f"Rule {rule.id}: {_condition(rule)}"
        + (f", held for {rule.hold_minutes:g} minutes" if rule.hold_minutes else ""),
        f"Condition since: {_local(alert.since, site)}",
    ]
    if kind == "cleared":
        lines.append(f"Cleared at: {_local(at, site)}")
    elif alert.raised_at is not None:
        lines.append(f"Raised at: {_local(alert.raised_at, site)}")
    if rule.metric == "sensor_drift":
        lines += [
            f"Latest bottle sample ({_local(alert.last_value_at, site)}): "
            f"{_drift_words(alert.last_value)}",
            f"Largest offset in this excursion: {_drift_words(alert.worst_value)}",
        ]
    else:
        lines += [
            f"Current value: "
            f"{_value(rule.metric, alert.last_value, alert.last_value_uncertainty)}"
            f" at {_local(alert.last_value_at, site)}",
            f"Worst value in this excursion: {_value(rule.metric, alert.worst_value)}",
        ]
    if alert.last_probability is not None:
        lines.append(f"Probability of being past the level: {alert.last_probability:.0%}")
    if alert.acknowledged_at is not None:
        lines.append(
            f"Acknowledged by {alert.acknowledged_by} at {_local(alert.acknowledged_at, site)}"
        )
    lines.append("")
    for advised_tank, advice in tank_advice:
        lines += _advice_lines(advice, advised_tank)
    lines += [
        "",
        # Web pages, not the API: a link from mail must open in a browser without a key.
        f"Dashboard: {PUBLIC_URL_TOKEN}/sites/{site.id}",
        f"Alerts: {PUBLIC_URL_TOKEN}/sites/{site.id}#alerts",
        "",
        chemistry.DOSING_CAUTION,
    ]
    text = "\n".join(lines) + "\n"
    return subject, text, text_to_html(subject, text)


def text_to_html(title: str, text: str) -> str:
    paragraphs = []
    for line in text.splitlines():
        escaped = html.escape(line)
        if escaped.startswith(("Dashboard: ", "Alerts: ", "Day page: ")):
            label, url = escaped.split(": ", 1)
            escaped = f'{label}: <a href="{url}">{url}</a>'
        paragraphs.append(f"<p>{escaped}</p>" if escaped else "")
    return (
        "<!doctype html><html><body>"
        f"<h2>{html.escape(title)}</h2>{''.join(paragraphs)}</body></html>"
    )


def message_id(kind: str, key: str, site_id: str) -> str:
    """A Message-ID fixed at write time, unique per notification (the outbox enforces it)."""
    return f"<{kind}.{key}.{site_id}@spatline.invalid>"


def write_outbox(
    *,
    session: Session,
    site_id: str,
    alert_id: int | None,
    kind: str,
    recipients: list[str],
    subject: str,
    body_text: str,
    body_html: str,
    message_key: str,
    now: dt.datetime,
) -> OutboxMessage:
    row = OutboxMessage(
        site_id=site_id,
        alert_id=alert_id,
        kind=kind,
        recipients=list(recipients),
        subject=subject[:300],
        body_text=body_text,
        body_html=body_html,
        message_id=message_id(kind, message_key, site_id),
        # Without recipients the mail cannot go anywhere; it stays listed for the operator.
        status="pending" if recipients else "unaddressed",
        attempts=0,
        next_attempt_at=now,
        created_at=now,
    )
    session.add(row)
    session.flush()
    return row
