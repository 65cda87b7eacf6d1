"""The "sensor_drift" alert: raised when the latest bottle sample disagrees with the sensor.

The alert goes through the alerts module's rule state machine and outbox
(:func:`app.alerts.evaluation.apply_observations`), so it is raised once, cleared once and
mailed like any other alert. Its rule is made on first use, per station; it watches the
absolute offset |sample pH - sensor pH| (total scale) with no hold time: a bottle sample is
a deliberate check, not a noisy series.
"""

from __future__ import annotations

import datetime as dt

from sqlalchemy import or_, select
from sqlalchemy.orm import Session

from app.alerts import state_machine as sm
from app.alerts.evaluation import Observed, RuleContext, apply_observations
from app.alerts.models import Alert, AlertRule
from app.alerts.rules import open_alert, thresholds_of
from app.sites.models import Site, Station, Tank

SENSOR_DRIFT_METRIC = "sensor_drift"


def _station_recipients(session: Session, station: Station) -> list[str]:
    """Whoever is mailed about this station or the tanks it feeds is told about its drift."""
    fed = select(Tank.pk).where(Tank.source_station_pk == station.pk)
    rules = session.scalars(
        select(AlertRule).where(
            AlertRule.deleted_at.is_(None),
            AlertRule.metric != SENSOR_DRIFT_METRIC,
            or_(AlertRule.station_pk == station.pk, AlertRule.tank_pk.in_(fed)),
        )
    )
    recipients: list[str] = []
    for rule in rules:
        for address in rule.recipients or []:
            if address not in recipients:
                recipients.append(address)
    return recipients


def drift_rule(
    *, session: Session, station: Station, level: float, now: dt.datetime
) -> AlertRule:
    """The station's sensor-drift rule, made on first use; its level follows the request."""
    rule = session.scalars(
        select(AlertRule).where(
            AlertRule.station_pk == station.pk,
            AlertRule.metric == SENSOR_DRIFT_METRIC,
            AlertRule.deleted_at.is_(None),
        )
    ).first()
    if rule is None:
        rule = AlertRule(
            site_id=station.site_id,
            station_pk=station.pk,
            metric=SENSOR_DRIFT_METRIC,
            direction="above",
            level=level,
            clear_level=level,
            hold_minutes=0.0,
            recipients=_station_recipients(session, station),
            repeat_minutes=0.0,
            enabled=True,
            origin="default",
            created_at=now,
            updated_at=now,
        )
        session.add(rule)
        session.flush()
    elif rule.level != level:
        rule.level = level
        rule.clear_level = level
        rule.updated_at = now
        session.flush()
    return rule


def judge_drift(
    *,
    session: Session,
    site: Site,
    station: Station,
    offset: float,
    collected_at: dt.datetime,
    level: float,
    now: dt.datetime,
) -> Alert | None:
    """Feed the latest sample's offset to the drift rule; return the open alert, if any."""
    rule = drift_rule(session=session, station=station, level=level, now=now)
    thresholds = thresholds_of(rule)
    size = abs(offset)
    observed = Observed(
        sm.Observation(at=collected_at, zone=sm.classify(thresholds, size)), value=size
    )
    apply_observations(RuleContext(session, site, rule, None, station, now), [observed])
    return open_alert(session=session, rule_id=rule.id)
