"""Rule evaluation: on every ingest (inside the ingest transaction) and by the sweep.

Each rule's decisions come from the pure state machine (:mod:`app.alerts.state_machine`);
this module turns readings into its observations, and its transitions and notifications
into alert rows and outbox mail, all in the caller's transaction, so that an alert change
and its mail are stored together or not at all.

Rules are locked while evaluated (``SELECT ... FOR UPDATE`` on PostgreSQL; on SQLite the
write transaction already holds the database's single write lock), and at most one open
alert per rule is enforced by a partial unique index: two processes cannot raise one
excursion twice.
"""

from __future__ import annotations

import dataclasses
import datetime as dt
import functools
import logging
from collections.abc import Sequence
from typing import Any

import numpy as np
from sqlalchemy import bindparam, func, or_, select
from sqlalchemy.orm import Session

import chemistry
from app.alerts import advice as advice_module
from app.alerts import state_machine as sm
from app.alerts.mail import compose_alert_message, write_outbox
from app.alerts.models import Alert, AlertRule
from app.alerts.rules import open_alert, thresholds_of
from app.readings.models import Reading
from app.sites.models import Site, Station, Tank

logger = logging.getLogger(__name__)

QC_FAIL = 4
# Rules evaluated here; other metrics (for example bottle-sample checks) have their own path.
INGEST_METRICS = frozenset(
    {
        "tank_omega_aragonite",
        "omega_aragonite",
        "ph_total",
        "pco2_uatm",
        "temperature_c",
        "salinity",
        "no_data",
        "qc_failed",
    }
)
# The sweep looks at these at every cycle: silence, and a failed latest reading (the ingest
# hands failed readings to no rule, and a batch of only failed readings to none at all).
SWEEP_METRICS = ("no_data", "qc_failed")
READING_COLUMN = {
    "omega_aragonite": "omega_aragonite",
    "ph_total": "ph_total",
    "pco2_uatm": "pco2_uatm",
    "temperature_c": "temperature_c",
    "salinity": "salinity",
}


@dataclasses.dataclass(frozen=True, slots=True)
class Observed:
    """An observation with the numbers to keep on the alert row."""

    observation: sm.Observation
    value: float
    uncertainty: float | None = None
    probability: float | None = None


@functools.lru_cache(maxsize=2)
def _rules_query(skip_locked: bool) -> Any:
    """The rules of station ``station_pk`` and of the tanks it feeds, built once (every
    ingest asks; building the select costs more than running it)."""
    station_pk = bindparam("station_pk")
    fed_tanks = select(Tank.pk).where(Tank.source_station_pk == station_pk)
    return (
        select(AlertRule)
        .where(
            AlertRule.enabled.is_(True),
            AlertRule.deleted_at.is_(None),
            or_(AlertRule.station_pk == station_pk, AlertRule.tank_pk.in_(fed_tanks)),
        )
        .order_by(AlertRule.id)
        .with_for_update(skip_locked=skip_locked)
        # Locked rows are read afresh: another transaction may have just changed them.
        .execution_options(populate_existing=True)
    )


def _rules_for_station(
    session: Session, station: Station, *, skip_locked: bool = False
) -> list[tuple[AlertRule, Tank | None]]:
    rules = list(session.scalars(_rules_query(skip_locked), {"station_pk": station.pk}))
    return [(rule, session.get(Tank, rule.tank_pk) if rule.tank_pk else None) for rule in rules]


def _latest_observed_at(session: Session, station_pk: int) -> dt.datetime | None:
    latest = session.scalar(
        select(func.max(Reading.observed_at)).where(Reading.station_pk == station_pk)
    )
    if latest is not None and latest.tzinfo is None:
        latest = latest.replace(tzinfo=dt.UTC)
    return latest


def no_data_observation(rule: AlertRule, latest: dt.datetime | None, now: dt.datetime) -> Observed:
    """Silence, in minutes, since the station's newest reading (or since the rule began)."""
    start = latest if latest is not None else rule.created_at
    silence = max((now - start).total_seconds() / 60.0, 0.0)
    thresholds = thresholds_of(rule)
    zone = sm.classify(thresholds, silence)
    return Observed(
        sm.Observation(at=now, zone=zone, started_at=start + dt.timedelta(minutes=rule.level)),
        value=silence,
    )


def _value_observations(
    site: Site,
    rule: AlertRule,
    tank: Tank | None,
    station: Station,
    readings: Sequence[Reading],
    tank_predictions: dict[int, Any] | None = None,
) -> list[Observed]:
    thresholds = thresholds_of(rule)
    if rule.metric == "qc_failed":
        return [
            Observed(
                sm.Observation(r.observed_at, sm.classify(thresholds, float(r.qc_overall))),
                value=float(r.qc_overall),
            )
            for r in readings
        ]
    good = [r for r in readings if r.qc_overall != QC_FAIL]
    if rule.metric == "tank_omega_aragonite":
        usable = [
            r
            for r in good
            if None not in (r.ph_total, r.alkalinity_used_umol_kg, r.temperature_c, r.salinity)
        ]
        if not usable or tank is None:
            return []
        # Several rules may watch one tank (warning and critical levels): the prediction
        # with its uncertainty is the dear part, so it is made once per tank per call.
        if tank_predictions is not None and tank.pk in tank_predictions:
            omega, uncertainty = tank_predictions[tank.pk]
            return _with_probability(thresholds, usable, omega, uncertainty)
        prediction = advice_module.predict_tank_water(
            site=site,
            tank=tank,
            station=station,
            temperature=[r.temperature_c for r in usable],
            salinity=[r.salinity for r in usable],
            ph_total=[r.ph_total for r in usable],
            alkalinity=[r.alkalinity_used_umol_kg for r in usable],
            u_alkalinity=[advice_module.alkalinity_uncertainty(station, r) for r in usable],
        )
        # What the larvae get: the treated water, unless the treatment is outside the dose
        # limits (then the untreated water, so an absurd dose cannot silence the alert).
        omega = np.atleast_1d(prediction.larvae_omega_aragonite)
        uncertainty = np.atleast_1d(prediction.larvae_omega_aragonite_uncertainty)
        if tank_predictions is not None:
            tank_predictions[tank.pk] = (omega, uncertainty)
        return _with_probability(thresholds, usable, omega, uncertainty)
    if rule.metric not in READING_COLUMN:
        return []  # judged by its own module (sensor_drift: app.samples.drift)
    column = READING_COLUMN[rule.metric]
    usable = [r for r in good if getattr(r, column) is not None]
    if rule.metric == "omega_aragonite":
        values = np.array([r.omega_aragonite for r in usable], dtype=float)
        uncertainty = np.array(
            [
                np.nan if r.omega_aragonite_uncertainty is None else r.omega_aragonite_uncertainty
                for r in usable
            ],
            dtype=float,
        )
        return _with_probability(thresholds, usable, values, uncertainty)
    return [
        Observed(
            sm.Observation(r.observed_at, sm.classify(thresholds, float(getattr(r, column)))),
            value=float(getattr(r, column)),
        )
        for r in usable
    ]


def _with_probability(
    thresholds: sm.Thresholds,
    readings: Sequence[Reading],
    values: np.ndarray,
    uncertainty: np.ndarray,
) -> list[Observed]:
    known = np.isfinite(uncertainty) & (uncertainty > 0)
    below = np.full(values.shape, np.nan)
    if np.any(known):
        below[known] = chemistry.probability_below(
            values[known], uncertainty[known], thresholds.level
        )
    beyond = below if thresholds.direction is sm.Direction.BELOW else 1.0 - below
    result = []
    for i, reading in enumerate(readings):
        probability = float(beyond[i]) if known[i] else None
        zone = sm.classify(thresholds, float(values[i]), probability)
        result.append(
            Observed(
                sm.Observation(reading.observed_at, zone),
                value=float(values[i]),
                uncertainty=float(uncertainty[i]) if known[i] else None,
                probability=probability,
            )
        )
    return result


def _machine_state(rule: AlertRule, alert: Alert | None) -> sm.RuleState:
    if alert is None:
        return sm.RuleState(last_observed_at=rule.last_observed_at)
    return sm.RuleState(
        phase=sm.Phase(alert.state),
        since=alert.since,
        raised_at=alert.raised_at,
        last_notified_at=alert.last_notified_at,
        last_observed_at=rule.last_observed_at,
    )


def _judged(rule: AlertRule, value: float | None) -> float | None:
    """The value the rule compares: a sensor offset is kept signed but judged by its size."""
    if value is None or rule.metric != "sensor_drift":
        return value
    return abs(value)


def _is_worse(direction: str, candidate: float, current: float | None) -> bool:
    if current is None:
        return True
    return candidate < current if direction == "below" else candidate > current


@dataclasses.dataclass
class RuleContext:
    session: Session
    site: Site
    rule: AlertRule
    tank: Tank | None
    station: Station
    now: dt.datetime


def _tank_advice_for_mail(ctx: RuleContext) -> list[tuple[Tank, dict[str, Any] | None]]:
    if ctx.tank is not None:
        tanks = [ctx.tank]
    else:
        tanks = list(
            ctx.session.scalars(
                select(Tank).where(Tank.source_station_pk == ctx.station.pk).order_by(Tank.id)
            )
        )
    result = []
    for tank in tanks:
        try:
            result.append(
                (
                    tank,
                    advice_module.tank_advice(
                        session=ctx.session, site=ctx.site, tank=tank, now=ctx.now
                    ),
                )
            )
        except chemistry.ChemistryInputError as error:
            logger.warning("tank advice for %s failed in an alert mail: %s", tank.id, error)
            result.append((tank, None))
    return result


def _notify(ctx: RuleContext, alert: Alert, notification: sm.Notification) -> None:
    subject, text, html_body = compose_alert_message(
        site=ctx.site,
        rule=ctx.rule,
        alert=alert,
        kind=notification.kind.value,
        station=ctx.station,
        tank=ctx.tank,
        tank_advice=_tank_advice_for_mail(ctx),
        at=notification.at,
    )
    write_outbox(
        session=ctx.session,
        site_id=ctx.site.id,
        alert_id=alert.id,
        kind=notification.kind.value,
        recipients=list(ctx.rule.recipients or []),
        subject=subject,
        body_text=text,
        body_html=html_body,
        message_key=f"alert{alert.id}.{notification.at.astimezone(dt.UTC):%Y%m%dT%H%M%S}",
        now=ctx.now,
    )


def apply_observations(ctx: RuleContext, observed: Sequence[Observed]) -> None:
    """Run the rule's state machine over ``observed`` and store what it decides."""
    rule = ctx.rule
    thresholds = thresholds_of(rule)
    alert = open_alert(session=ctx.session, rule_id=rule.id)
    state = _machine_state(rule, alert)
    for item in sorted(observed, key=lambda o: o.observation.at):
        result = sm.step(thresholds, state, item.observation)
        if result.state == state:
            continue
        for transition in result.transitions:
            if transition.from_state is None:
                alert = Alert(
                    rule_id=rule.id,
                    site_id=rule.site_id,
                    state=sm.AlertState.PENDING.value,
                    since=result.state.since or transition.at,
                    first_value=item.value,
                    created_at=ctx.now,
                )
                ctx.session.add(alert)
            else:
                assert alert is not None
                alert.state = transition.to_state.value
                if transition.to_state in (sm.AlertState.CLEARED, sm.AlertState.LAPSED):
                    alert.closed_at = transition.at
                    alert.closed_reason = (
                        "recovered"
                        if transition.to_state is sm.AlertState.CLEARED
                        else "did_not_hold"
                    )
                if transition.to_state is sm.AlertState.ACTIVE:
                    alert.raised_at = transition.at
        if alert is not None:
            alert.last_value = item.value
            alert.last_value_uncertainty = item.uncertainty
            alert.last_probability = item.probability
            alert.last_value_at = item.observation.at
            if alert.state != sm.AlertState.CLEARED.value and _is_worse(
                rule.direction, _judged(rule, item.value), _judged(rule, alert.worst_value)
            ):
                alert.worst_value = item.value
            ctx.session.flush()
        for notification in result.notifications:
            assert alert is not None
            if notification.kind is not sm.NotificationKind.CLEARED:
                alert.last_notified_at = notification.at
            _notify(ctx, alert, notification)
        if alert is not None and alert.state not in {s.value for s in sm.OPEN_ALERT_STATES}:
            alert = None
        state = result.state
    rule.last_observed_at = state.last_observed_at
    ctx.session.flush()


def evaluate_after_ingest(
    *, session: Session, station: Station, readings: Sequence[Reading], now: dt.datetime
) -> None:
    """Evaluate every rule that watches ``station`` (or a tank fed by it) on new readings.

    Called by the readings ingest inside its own transaction, after the readings are
    flushed, so that an alert change and its outbox mail commit (or roll back) together
    with the readings. ``readings`` are the newly stored reading rows of this station;
    ``now`` is the ingest time (UTC). Failed readings (QC 4) are left out of value rules.
    """
    rules = _rules_for_station(session, station)
    if not rules:
        return
    site = session.get(Site, station.site_id)
    assert site is not None
    ordered = sorted(readings, key=lambda r: r.observed_at)
    tank_predictions: dict[int, Any] = {}
    latest = None
    for rule, tank in rules:
        if rule.metric not in INGEST_METRICS:
            continue  # e.g. bottle-sample rules, evaluated where their data arrives
        ctx = RuleContext(session, site, rule, tank, station, now)
        if rule.metric == "no_data":
            if latest is None:
                latest = _latest_observed_at(session, station.pk)
            observed = [no_data_observation(rule, latest, now)]
        else:
            observed = _value_observations(site, rule, tank, station, ordered, tank_predictions)
        if observed:
            apply_observations(ctx, observed)


# Value rules whose pending alerts lapse when their data go stale (see lapse_stale_pending).
STALE_LAPSE_METRICS = tuple(sorted(INGEST_METRICS - set(SWEEP_METRICS)))


def lapse_stale_pending(*, session: Session, now: dt.datetime) -> int:
    """Close pending value alerts whose last observation is older than the no-data window.

    A pending alert waits for readings that show the condition held for the rule's hold
    time; without new readings it would wait forever on a stale value. Silence is the no-data
    rule's alert, so the pending one lapses (``closed_reason`` "stale_data") and nothing is
    mailed; the next reading starts a fresh excursion. Active alerts stay active.
    """
    rows = session.execute(
        select(Alert, AlertRule)
        .join(AlertRule, AlertRule.id == Alert.rule_id)
        .where(
            Alert.state == sm.AlertState.PENDING.value,
            AlertRule.metric.in_(STALE_LAPSE_METRICS),
        )
        .order_by(Alert.id)
        .with_for_update(skip_locked=True, of=AlertRule)
        .execution_options(populate_existing=True)
    ).all()
    lapsed = 0
    for alert, rule in rows:
        tank = session.get(Tank, rule.tank_pk) if rule.tank_pk else None
        station_pk = rule.station_pk if rule.station_pk is not None else tank.source_station_pk
        window = advice_module.no_data_window_minutes(
            session=session, station_pk=station_pk, tank_pk=rule.tank_pk
        )
        last = alert.last_value_at or alert.since
        if last is not None and last.tzinfo is None:
            last = last.replace(tzinfo=dt.UTC)
        if last is None or now - last <= dt.timedelta(minutes=window):
            continue
        alert.state = sm.AlertState.LAPSED.value
        alert.closed_at = now
        alert.closed_reason = "stale_data"
        lapsed += 1
    session.flush()
    return lapsed


def sweep(*, session: Session, now: dt.datetime) -> int:
    """Evaluate the no-data rules at ``now`` and send due reminders; returns rules handled.

    Runs in the caller's transaction. On PostgreSQL rules locked by another process (an
    ingest or another worker's sweep) are skipped, not waited for.
    """
    open_states = [s.value for s in sm.OPEN_ALERT_STATES]
    has_open_alert = select(Alert.rule_id).where(Alert.state.in_(open_states))
    rules = list(
        session.scalars(
            select(AlertRule)
            .where(
                AlertRule.enabled.is_(True),
                AlertRule.deleted_at.is_(None),
                or_(
                    AlertRule.metric.in_(SWEEP_METRICS),
                    (AlertRule.repeat_minutes > 0) & AlertRule.id.in_(has_open_alert),
                ),
            )
            .order_by(AlertRule.id)
            .with_for_update(skip_locked=True)
            .execution_options(populate_existing=True)
        )
    )
    handled = 0
    for rule in rules:
        tank = session.get(Tank, rule.tank_pk) if rule.tank_pk else None
        station_pk = rule.station_pk if rule.station_pk is not None else tank.source_station_pk
        station = session.get(Station, station_pk)
        site = session.get(Site, rule.site_id)
        ctx = RuleContext(session, site, rule, tank, station, now)
        if rule.metric == "no_data":
            apply_observations(
                ctx, [no_data_observation(rule, _latest_observed_at(session, station_pk), now)]
            )
        elif rule.metric == "qc_failed":
            latest = session.scalars(
                select(Reading)
                .where(Reading.station_pk == station_pk)
                .order_by(Reading.observed_at.desc())
                .limit(1)
            ).first()
            if latest is not None:
                apply_observations(ctx, _value_observations(site, rule, tank, station, [latest]))
        alert = open_alert(session=session, rule_id=rule.id)
        if alert is not None and rule.repeat_minutes > 0:
            result = sm.tick(thresholds_of(rule), _machine_state(rule, alert), now)
            for notification in result.notifications:
                alert.last_notified_at = notification.at
                _notify(ctx, alert, notification)
        handled += 1
    lapse_stale_pending(session=session, now=now)
    session.flush()
    return handled
