"""The "sensor_drift" alert: raised when the latest bottle sample disagrees with the sensor.

The alert goes through the alerts module's rule state machine and outbox
(:func:`app.alerts.evaluation.apply_observations`), so it is raised once, cleared once and
mailed like any other alert. Its rule is made on first use, per station; it judges the size
of the offset |sample pH - sensor pH| (total scale, the sensor's median within 30 minutes of
collection) with no hold time, a bottle sample being a deliberate check, not a noisy series.
The alert keeps the signed offset (sample minus sensor; negative: the sensor reads high) so
that its mail says which way the sensor is off. It clears at or below
``DEFAULT_DRIFT_CLEAR_LEVEL`` (0.03), under the 0.05 alert level.

The offset is judged when a sample is stored, in the same transaction (as readings are
judged on ingest), so reading the pH check never writes. The level is the rule's own
(``DEFAULT_DRIFT_LEVEL`` when the rule is made); change it through the alert-rules API.
"""

from __future__ import annotations

import datetime as dt

from sqlalchemy import or_, select
from sqlalchemy.orm import Session

from app.alerts import state_machine as sm
from app.alerts.evaluation import Observed, RuleContext, apply_observations
from app.alerts.models import Alert, AlertRule
from app.alerts.rules import open_alert, thresholds_of
from app.samples.models import LabSample
from app.samples.schemas import LabSampleCreate
from app.samples.service import (
    DEFAULT_DRIFT_CLEAR_LEVEL,
    DEFAULT_DRIFT_LEVEL,
    create_sample,
    list_samples,
    sample_ph_offsets,
)
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


def existing_drift_rule(*, session: Session, station: Station) -> AlertRule | None:
    """The station's sensor-drift rule, if a sample has made one; never creates it."""
    return session.scalars(
        select(AlertRule).where(
            AlertRule.station_pk == station.pk,
            AlertRule.metric == SENSOR_DRIFT_METRIC,
            AlertRule.deleted_at.is_(None),
        )
    ).first()


def drift_rule(
    *, session: Session, station: Station, level: float, now: dt.datetime
) -> AlertRule:
    """The station's sensor-drift rule, made on first use with ``level``."""
    rule = existing_drift_rule(session=session, station=station)
    if rule is None:
        rule = AlertRule(
            site_id=station.site_id,
            station_pk=station.pk,
            metric=SENSOR_DRIFT_METRIC,
            direction="above",
            level=level,
            clear_level=min(DEFAULT_DRIFT_CLEAR_LEVEL, level),
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
    return rule


def judge_drift(
    *,
    session: Session,
    site: Site,
    station: Station,
    offset: float,
    collected_at: dt.datetime,
    now: dt.datetime,
    level: float = DEFAULT_DRIFT_LEVEL,
) -> Alert | None:
    """Feed the latest sample's offset to the drift rule; return the open alert, if any.

    ``level`` is used only when the rule does not exist yet.
    """
    rule = drift_rule(session=session, station=station, level=level, now=now)
    thresholds = thresholds_of(rule)
    observed = Observed(
        sm.Observation(at=collected_at, zone=sm.classify(thresholds, abs(offset))),
        value=offset,
    )
    apply_observations(RuleContext(session, site, rule, None, station, now), [observed])
    return open_alert(session=session, rule_id=rule.id)


def judge_latest_sample(
    *, session: Session, site: Site, station: Station, now: dt.datetime
) -> Alert | None:
    """Judge the offset of the station's latest sample that has one; the open alert, if any.

    Called when a sample is stored. The latest sample by collection time decides (a
    backfilled older sample does not overrule a newer check); samples without two carbonate
    parameters, or without sensor readings around their collection, are passed over.
    """
    samples = list_samples(session=session, station=station)
    for sample in reversed(samples):
        offsets = sample_ph_offsets(session=session, site=site, station=station,
                                    samples=[sample])
        if not offsets or offsets[0]["offset"] is None:
            continue
        entry = offsets[0]
        return judge_drift(
            session=session,
            site=site,
            station=station,
            offset=float(entry["offset"]),  # type: ignore[arg-type]
            collected_at=entry["collected_at"],  # type: ignore[arg-type]
            now=now,
        )
    rule = existing_drift_rule(session=session, station=station)
    return None if rule is None else open_alert(session=session, rule_id=rule.id)


def record_sample(
    *, session: Session, site: Site, station: Station, data: LabSampleCreate, now: dt.datetime
) -> LabSample:
    """Store a bottle sample and judge the drift alert in the same (uncommitted) transaction.

    The one way samples are stored (API and web form), so no sample escapes the check.
    Raises ``SampleConflictError`` when the station has a sample at that time.
    """
    sample = create_sample(session=session, station=station, data=data)
    judge_latest_sample(session=session, site=site, station=station, now=now)
    return sample
