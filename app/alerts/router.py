"""Tank advice, alert rules, alerts and notifications over HTTP."""

from __future__ import annotations

from collections.abc import Iterator
from contextlib import contextmanager
from typing import Annotated, Literal

from fastapi import APIRouter, HTTPException, Query, Request, Response, status
from sqlalchemy import select
from sqlalchemy.orm import Session

import chemistry
from app.alerts import advice as advice_module
from app.alerts import rules as rules_module
from app.alerts.mail import fill_public_url
from app.alerts.models import Alert, AlertRule, OutboxMessage
from app.alerts.schemas import (
    AlertPublic,
    AlertRuleCreate,
    AlertRulePublic,
    AlertRuleUpdate,
    NotificationPublic,
    TankAdvicePublic,
)
from app.alerts.state_machine import AlertState
from app.auth.dependencies import AdminDep, ReaderDep
from app.db import SessionDep, utcnow
from app.errors import RowId
from app.sites.models import Station, Tank

router = APIRouter(tags=["alerts"])

ChemicalName = Literal["sodium_carbonate", "sodium_bicarbonate", "sodium_hydroxide"]
AlertStateName = Literal["pending", "active", "acknowledged", "cleared", "lapsed", "open"]


def _not_found(error: LookupError) -> HTTPException:
    return HTTPException(status_code=status.HTTP_404_NOT_FOUND, detail=str(error))


def _site(session: Session, site_id: str) -> None:
    try:
        rules_module.get_site(session=session, site_id=site_id)
    except rules_module.NotFoundError as error:
        raise _not_found(error) from None


@contextmanager
def _refusals_answered(
    session: Session, *, refused: int = 422
) -> Iterator[None]:
    """A lookup that misses answers 404 and a refused change ``refused``; neither is kept."""
    try:
        yield
    except rules_module.NotFoundError as error:
        session.rollback()
        raise _not_found(error) from None
    except rules_module.RuleInputError as error:
        session.rollback()
        raise HTTPException(status_code=refused, detail=str(error)) from None


def _notification_public(row: OutboxMessage, public_url: str) -> NotificationPublic:
    item = NotificationPublic.model_validate(row)
    item.body_text = fill_public_url(row.body_text, public_url)
    return item


def _rule_public(session: Session, rule: AlertRule) -> AlertRulePublic:
    tank = session.get(Tank, rule.tank_pk) if rule.tank_pk else None
    station = session.get(Station, rules_module.watched_station_pk(rule, tank))
    alert = rules_module.open_alert(session=session, rule_id=rule.id)
    return AlertRulePublic(
        id=rule.id,
        site_id=rule.site_id,
        tank_id=tank.id if tank else None,
        station_id=station.id,
        metric=rule.metric,
        direction=rule.direction,
        level=rule.level,
        clear_level=rule.clear_level,
        hold_minutes=rule.hold_minutes,
        min_probability=rule.min_probability,
        recipients=list(rule.recipients or []),
        repeat_minutes=rule.repeat_minutes,
        enabled=rule.enabled,
        origin=rule.origin,
        state=alert.state if alert is not None else "watching",
        created_at=rule.created_at,
        updated_at=rule.updated_at,
    )


def _alert_public(session: Session, alert: Alert) -> AlertPublic:
    rule = session.get(AlertRule, alert.rule_id)
    tank = session.get(Tank, rule.tank_pk) if rule.tank_pk else None
    station = session.get(Station, rules_module.watched_station_pk(rule, tank))
    return AlertPublic(
        id=alert.id,
        rule_id=rule.id,
        site_id=alert.site_id,
        tank_id=tank.id if tank else None,
        station_id=station.id,
        metric=rule.metric,
        direction=rule.direction,
        level=rule.level,
        clear_level=rule.clear_level,
        state=alert.state,
        since=alert.since,
        raised_at=alert.raised_at,
        acknowledged_at=alert.acknowledged_at,
        acknowledged_by=alert.acknowledged_by,
        closed_at=alert.closed_at,
        closed_reason=alert.closed_reason,
        first_value=alert.first_value,
        worst_value=alert.worst_value,
        last_value=alert.last_value,
        last_value_uncertainty=alert.last_value_uncertainty,
        last_probability=alert.last_probability,
        last_value_at=alert.last_value_at,
        caution=chemistry.DOSING_CAUTION,
    )


@router.get(
    "/sites/{site_id}/tanks/{tank_id}/advice",
    response_model=TankAdvicePublic,
    summary="The water the tank will get, and the dose and aeration advice",
)
def read_tank_advice(
    site_id: str,
    tank_id: str,
    session: SessionDep,
    _: ReaderDep,
    chemical: Annotated[
        ChemicalName, Query(description="Chemical to dose with.")
    ] = "sodium_carbonate",
) -> dict:
    try:
        site = rules_module.get_site(session=session, site_id=site_id)
        tank = rules_module.get_tank(session=session, site_id=site_id, tank_id=tank_id)
    except rules_module.NotFoundError as error:
        raise _not_found(error) from None
    try:
        advice = advice_module.tank_advice(session=session, site=site, tank=tank, chemical=chemical)
    except chemistry.ChemistryInputError as error:
        raise HTTPException(
            status_code=422,
            detail=f"The latest reading cannot be carried to the tank: {error}",
        ) from None
    if advice is None:
        raise HTTPException(
            status_code=status.HTTP_404_NOT_FOUND,
            detail=f"Station '{tank.source_station.id}', which feeds tank '{tank.id}', has no "
            "reading that passed QC with derived chemistry yet; advice needs one.",
        )
    return advice


@router.post(
    "/sites/{site_id}/alert-rules",
    response_model=AlertRulePublic,
    status_code=status.HTTP_201_CREATED,
    summary="Add an alert rule for a tank or a station",
)
def create_alert_rule(
    site_id: str, body: AlertRuleCreate, session: SessionDep, _: AdminDep
) -> AlertRulePublic:
    _site(session, site_id)
    with _refusals_answered(session):
        rule = rules_module.create_rule(session=session, site_id=site_id, data=body)
    session.commit()
    return _rule_public(session, rule)


@router.get(
    "/sites/{site_id}/alert-rules",
    response_model=list[AlertRulePublic],
    summary="The site's alert rules",
)
def list_alert_rules(site_id: str, session: SessionDep, _: ReaderDep) -> list[AlertRulePublic]:
    _site(session, site_id)
    return [
        _rule_public(session, rule)
        for rule in rules_module.list_rules(session=session, site_id=site_id)
    ]


@router.patch(
    "/sites/{site_id}/alert-rules/{rule_id}",
    response_model=AlertRulePublic,
    summary="Change an alert rule's levels, timing or recipients",
)
def update_alert_rule(
    site_id: str, rule_id: RowId, body: AlertRuleUpdate, session: SessionDep, _: AdminDep
) -> AlertRulePublic:
    with _refusals_answered(session):
        rule = rules_module.get_rule(session=session, site_id=site_id, rule_id=rule_id)
        rules_module.update_rule(session=session, rule=rule, data=body)
    session.commit()
    return _rule_public(session, rule)


@router.delete(
    "/sites/{site_id}/alert-rules/{rule_id}",
    status_code=status.HTTP_204_NO_CONTENT,
    summary="Retire an alert rule (its alerts stay in the history)",
)
def delete_alert_rule(site_id: str, rule_id: RowId, session: SessionDep, _: AdminDep) -> Response:
    try:
        rule = rules_module.get_rule(session=session, site_id=site_id, rule_id=rule_id)
    except rules_module.NotFoundError as error:
        raise _not_found(error) from None
    rules_module.retire_rule(session=session, rule=rule)
    session.commit()
    return Response(status_code=status.HTTP_204_NO_CONTENT)


@router.get(
    "/sites/{site_id}/alerts",
    response_model=list[AlertPublic],
    summary="The site's alerts, newest first; `state=open` for pending, active and acknowledged",
)
def list_alerts(
    site_id: str,
    session: SessionDep,
    _: ReaderDep,
    state: AlertStateName | None = None,
    limit: Annotated[int, Query(ge=1, le=1000)] = 200,
) -> list[AlertPublic]:
    _site(session, site_id)
    query = select(Alert).where(Alert.site_id == site_id)
    if state == "open":
        query = query.where(
            Alert.state.in_(
                [AlertState.PENDING.value, AlertState.ACTIVE.value, AlertState.ACKNOWLEDGED.value]
            )
        )
    elif state is not None:
        query = query.where(Alert.state == state)
    alerts = session.scalars(query.order_by(Alert.since.desc(), Alert.id.desc()).limit(limit))
    return [_alert_public(session, alert) for alert in alerts]


@router.post(
    "/alerts/{alert_id}/acknowledge",
    response_model=AlertPublic,
    summary="Acknowledge an active alert (records who and when; stops reminders)",
)
def acknowledge_alert(alert_id: RowId, session: SessionDep, principal: ReaderDep) -> AlertPublic:
    alert = session.get(Alert, alert_id)
    if alert is None:
        raise HTTPException(status_code=404, detail=f"There is no alert with id {alert_id}.")
    with _refusals_answered(session, refused=status.HTTP_409_CONFLICT):
        rules_module.acknowledge_alert(
            session=session, alert=alert, who=f"{principal.label} (key {principal.key_id})"
        )
    session.commit()
    return _alert_public(session, alert)


@router.post(
    "/notifications/{notification_id}/resend",
    response_model=NotificationPublic,
    summary="Queue a failed notification again (admin); the sender retries it as new",
)
def resend_notification(
    notification_id: RowId, request: Request, session: SessionDep, _: AdminDep
) -> NotificationPublic:
    row = session.get(OutboxMessage, notification_id)
    if row is None:
        raise HTTPException(
            status_code=404, detail=f"There is no notification with id {notification_id}."
        )
    with _refusals_answered(session, refused=status.HTTP_409_CONFLICT):
        rules_module.requeue_notification(session=session, row=row, now=utcnow())
    session.commit()
    return _notification_public(row, request.app.state.settings.public_url)


@router.get(
    "/sites/{site_id}/notifications",
    response_model=list[NotificationPublic],
    summary="Mail written for the site (sent, waiting, or without recipients), newest first",
)
def list_notifications(
    site_id: str,
    request: Request,
    session: SessionDep,
    _: ReaderDep,
    limit: Annotated[int, Query(ge=1, le=1000)] = 200,
    status: Annotated[
        Literal["pending", "sent", "failed", "unaddressed"] | None,
        Query(description="Only notifications in this state, e.g. failed."),
    ] = None,
) -> list[NotificationPublic]:
    _site(session, site_id)
    query = select(OutboxMessage).where(OutboxMessage.site_id == site_id)
    if status is not None:
        query = query.where(OutboxMessage.status == status)
    rows = session.scalars(
        query
        .order_by(OutboxMessage.created_at.desc(), OutboxMessage.id.desc())
        .limit(limit)
    )
    public_url = request.app.state.settings.public_url
    return [_notification_public(row, public_url) for row in rows]
