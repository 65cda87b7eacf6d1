"""Data access for alert rules and alerts (keyword-only functions; no HTTP here)."""

from __future__ import annotations

import datetime as dt
from typing import Any

from sqlalchemy import select
from sqlalchemy.orm import Session

from app.alerts import state_machine as sm
from app.alerts.models import Alert, AlertRule
from app.alerts.schemas import (
    DEFAULT_DIRECTION,
    DEFAULT_LEVEL,
    LEVEL_RANGES,
    PROBABILISTIC_METRICS,
    AlertRuleCreate,
    AlertRuleUpdate,
)
from app.db import utcnow
from app.errors import no_site, site_has_no
from app.sites.models import Site, Station, Tank

# Default tank rules. The clear level sits 0.2 above the floor so that water hovering at the
# floor does not raise, clear and raise again (design default); 15 and 30 minutes are the
# issue's defaults.
DEFAULT_OMEGA_HOLD_MINUTES = 15.0
DEFAULT_OMEGA_CLEAR_MARGIN = 0.2
DEFAULT_SILENCE_MINUTES = 30.0


class RuleInputError(ValueError):
    """A rule that cannot be stored; the message names the field and the allowed values."""


class NotFoundError(LookupError):
    """An id that does not exist in this site; the message says which."""


def thresholds_of(rule: AlertRule) -> sm.Thresholds:
    return sm.Thresholds(
        direction=sm.Direction(rule.direction),
        level=rule.level,
        clear_level=rule.clear_level,
        hold_minutes=rule.hold_minutes,
        repeat_minutes=rule.repeat_minutes,
        min_probability=rule.min_probability,
    )


def _check_thresholds(values: dict[str, Any]) -> None:
    metric = values["metric"]
    low, high, unit = LEVEL_RANGES[metric]
    for name in ("level", "clear_level"):
        value = values[name]
        if not low <= value <= high:
            raise RuleInputError(
                f"{name} for metric '{metric}' must be between {low:g} and {high:g} ({unit}); "
                f"got {value:g}."
            )
    if values.get("min_probability") is not None and metric not in PROBABILISTIC_METRICS:
        raise RuleInputError(
            f"min_probability applies only to the metrics {', '.join(PROBABILISTIC_METRICS)}; "
            f"remove it for '{metric}'."
        )
    try:
        sm.Thresholds(
            direction=sm.Direction(values["direction"]),
            level=values["level"],
            clear_level=values["clear_level"],
            hold_minutes=values["hold_minutes"],
            repeat_minutes=values["repeat_minutes"],
            min_probability=values.get("min_probability"),
        )
    except ValueError as error:
        raise RuleInputError(str(error)) from None


def get_site(*, session: Session, site_id: str) -> Site:
    site = session.get(Site, site_id)
    if site is None:
        raise NotFoundError(no_site(site_id))
    return site


def get_tank(*, session: Session, site_id: str, tank_id: str) -> Tank:
    tank = session.scalars(select(Tank).where(Tank.site_id == site_id, Tank.id == tank_id)).first()
    if tank is None:
        raise NotFoundError(site_has_no(site_id, "tank", tank_id))
    return tank


def get_station(*, session: Session, site_id: str, station_id: str) -> Station:
    station = session.scalars(
        select(Station).where(Station.site_id == site_id, Station.id == station_id)
    ).first()
    if station is None:
        raise NotFoundError(site_has_no(site_id, "station", station_id))
    return station


def create_rule(
    *, session: Session, site_id: str, data: AlertRuleCreate, origin: str = "operator"
) -> AlertRule:
    """Store a rule after filling in the metric's defaults and checking its thresholds."""
    tank = station = None
    if data.tank_id is not None:
        tank = get_tank(session=session, site_id=site_id, tank_id=data.tank_id)
    else:
        assert data.station_id is not None
        station = get_station(session=session, site_id=site_id, station_id=data.station_id)
    direction = data.direction or DEFAULT_DIRECTION.get(data.metric)
    if direction is None:
        raise RuleInputError(
            f"direction is required for metric '{data.metric}': 'below' or 'above'."
        )
    level = data.level
    if level is None and data.metric == "tank_omega_aragonite" and tank is not None:
        level = tank.omega_floor
    if level is None:
        level = DEFAULT_LEVEL.get(data.metric)
    if level is None:
        low, high, unit = LEVEL_RANGES[data.metric]
        raise RuleInputError(
            f"level is required for metric '{data.metric}': between {low:g} and {high:g} ({unit})."
        )
    clear_level = data.clear_level
    if clear_level is None and data.metric in DEFAULT_LEVEL:
        clear_level = level
    if clear_level is None:
        raise RuleInputError(
            f"clear_level is required for metric '{data.metric}': the value at which the alert "
            f"clears, {'at or above' if direction == 'below' else 'at or below'} level {level:g}."
        )
    values = dict(
        metric=data.metric,
        direction=direction,
        level=float(level),
        clear_level=float(clear_level),
        hold_minutes=data.hold_minutes,
        repeat_minutes=data.repeat_minutes,
        min_probability=data.min_probability,
    )
    _check_thresholds(values)
    rule = AlertRule(
        site_id=site_id,
        tank_pk=tank.pk if tank is not None else None,
        station_pk=station.pk if station is not None else None,
        recipients=[str(r) for r in data.recipients],
        enabled=data.enabled,
        origin=origin,
        **values,
    )
    session.add(rule)
    session.flush()
    return rule


def create_default_rules(*, session: Session, tank: Tank) -> list[AlertRule]:
    """The rules every new tank gets: predicted omega below its floor for 15 minutes, and
    no data at its source station for 30 minutes. No recipients yet: their mail waits in the
    notifications list until an admin adds addresses."""
    rules = [
        AlertRule(
            site_id=tank.site_id,
            tank_pk=tank.pk,
            metric="tank_omega_aragonite",
            direction="below",
            level=float(tank.omega_floor),
            clear_level=float(tank.omega_floor) + DEFAULT_OMEGA_CLEAR_MARGIN,
            hold_minutes=DEFAULT_OMEGA_HOLD_MINUTES,
            recipients=[],
            repeat_minutes=0.0,
            enabled=True,
            origin="default",
        ),
        AlertRule(
            site_id=tank.site_id,
            tank_pk=tank.pk,
            metric="no_data",
            direction="above",
            level=DEFAULT_SILENCE_MINUTES,
            clear_level=DEFAULT_SILENCE_MINUTES,
            hold_minutes=0.0,
            recipients=[],
            repeat_minutes=0.0,
            enabled=True,
            origin="default",
        ),
    ]
    session.add_all(rules)
    session.flush()
    return rules


def list_rules(*, session: Session, site_id: str) -> list[AlertRule]:
    return list(
        session.scalars(
            select(AlertRule)
            .where(AlertRule.site_id == site_id, AlertRule.deleted_at.is_(None))
            .order_by(AlertRule.id)
        )
    )


def get_rule(*, session: Session, site_id: str, rule_id: int) -> AlertRule:
    rule = session.get(AlertRule, rule_id)
    if rule is None or rule.site_id != site_id or rule.deleted_at is not None:
        raise NotFoundError(site_has_no(site_id, "alert rule", rule_id))
    return rule


def open_alert(*, session: Session, rule_id: int) -> Alert | None:
    return session.scalars(
        select(Alert)
        .where(
            Alert.rule_id == rule_id,
            Alert.state.in_([s.value for s in sm.OPEN_ALERT_STATES]),
        )
        .execution_options(populate_existing=True)
    ).first()


def update_rule(*, session: Session, rule: AlertRule, data: AlertRuleUpdate) -> AlertRule:
    changes = data.model_dump(exclude_unset=True)
    if "recipients" in changes and changes["recipients"] is not None:
        changes["recipients"] = [str(r) for r in changes["recipients"]]
    for name in ("direction", "level", "clear_level", "hold_minutes", "repeat_minutes"):
        if name in changes and changes[name] is None:
            raise RuleInputError(f"{name} cannot be null.")
    values = dict(
        metric=rule.metric,
        direction=changes.get("direction", rule.direction),
        level=changes.get("level", rule.level),
        clear_level=changes.get("clear_level", rule.clear_level),
        hold_minutes=changes.get("hold_minutes", rule.hold_minutes),
        repeat_minutes=changes.get("repeat_minutes", rule.repeat_minutes),
        min_probability=changes.get("min_probability", rule.min_probability),
    )
    _check_thresholds(values)
    for name, value in changes.items():
        if name == "recipients" and value is None:
            continue
        setattr(rule, name, value)
    session.flush()
    return rule


def retire_rule(*, session: Session, rule: AlertRule, now: dt.datetime | None = None) -> None:
    """Stop a rule. Its history stays; an open alert closes without a mail."""
    now = now or utcnow()
    alert = open_alert(session=session, rule_id=rule.id)
    if alert is not None:
        alert.state = sm.AlertState.CLEARED.value
        alert.closed_at = now
        alert.closed_reason = "rule_retired"
    rule.deleted_at = now
    rule.enabled = False
    session.flush()


def watched_station_pk(rule: AlertRule, tank: Tank | None) -> int:
    if rule.station_pk is not None:
        return rule.station_pk
    assert tank is not None
    return tank.source_station_pk


def acknowledge_alert(
    *, session: Session, alert: Alert, who: str, now: dt.datetime | None = None
) -> Alert:
    """Record who saw an active alert and when; reminders stop, the clear mail still comes."""
    if alert.state == sm.AlertState.ACKNOWLEDGED.value:
        return alert
    if alert.state != sm.AlertState.ACTIVE.value:
        raise RuleInputError(
            f"Only an active alert can be acknowledged; alert {alert.id} is {alert.state}."
        )
    alert.state = sm.AlertState.ACKNOWLEDGED.value
    alert.acknowledged_at = now or utcnow()
    alert.acknowledged_by = who
    session.flush()
    return alert


def requeue_notification(*, session: Session, row: Any, now: dt.datetime) -> None:
    """Queue a failed mail again: pending, due now, with a fresh count of attempts.

    Raises RuleInputError when the mail is not "failed" (sent or waiting mail is left alone,
    so a resend can never send a mail twice).
    """
    if row.status != "failed":
        raise RuleInputError(
            f"Notification {row.id} is {row.status!r}; only a 'failed' notification can be "
            "queued again."
        )
    row.status = "pending"
    row.attempts = 0
    row.next_attempt_at = now
    row.lease_owner = None
    row.lease_expires_at = None
    session.flush()
