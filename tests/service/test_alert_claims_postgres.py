"""Claims on PostgreSQL, step by step: locked rows are skipped, not shared and not waited for.

Two connections of one engine act as two workers. Connection A claims inside a transaction
that the test keeps open; connection B claims at the same moment. B must get none of A's
rows, and must not wait for A's locks: B runs with a short ``lock_timeout``, so a claim
without ``FOR UPDATE`` (B would update rows A holds) or without ``SKIP LOCKED`` (B would
queue behind A) fails with a lock timeout instead of passing or hanging. Once A's lease
has expired, B may take A's rows.

The rows must be visible to both connections, so this test commits and removes its own
site at the end (the cascade takes the rules, alerts and mail with it).
"""

from __future__ import annotations

import datetime as dt
import os

import pytest
from sqlalchemy import delete, func, or_, select
from sqlalchemy.orm import Session, sessionmaker

from app.alerts.evaluation import sweep
from app.alerts.models import Alert, AlertRule, OutboxMessage
from app.alerts.sender import LEASE_SECONDS, claim
from app.sites import service as sites_service
from app.sites.models import Site
from app.sites.schemas import SiteCreate, StationCreate

pytestmark = [
    pytest.mark.postgres,
    pytest.mark.db,
    pytest.mark.skipif(
        not os.environ.get("SPATLINE_TEST_DATABASE_URL", "").startswith("postgresql"),
        reason="needs PostgreSQL: set SPATLINE_TEST_DATABASE_URL to a scratch database",
    ),
]

MAILS = 5
# Long enough for a skipped-row claim on a loaded machine, short enough to fail fast.
LOCK_TIMEOUT = "3s"


@pytest.fixture
def claim_site(engine):
    site_id = f"claims-{os.getpid()}"
    now = dt.datetime.now(dt.UTC).replace(microsecond=0)
    two_hours_ago = now - dt.timedelta(hours=2)
    with Session(engine) as session:
        # The claims and the sweep take every due row in the database: start from none.
        due_elsewhere = session.scalar(
            select(func.count(OutboxMessage.id)).where(OutboxMessage.status == "pending")
        )
        sweepable = session.scalar(
            select(func.count(AlertRule.id)).where(AlertRule.metric.in_(("no_data", "qc_failed")))
        )
        assert (due_elsewhere, sweepable) == (0, 0), "the scratch database holds left-over rows"
        site = sites_service.create_site(
            session=session,
            data=SiteCreate(id=site_id, name="Claims", timezone="UTC", daily_summary_hour=0),
        )
        station = sites_service.create_station(
            session=session,
            site=site,
            data=StationCreate(id=f"{site_id}-intake", name="Silent intake", role="intake"),
        )
        rule = AlertRule(
            site_id=site_id,
            station_pk=station.pk,
            metric="no_data",
            direction="above",
            level=30.0,
            clear_level=30.0,
            hold_minutes=0.0,
            recipients=["night-shift@hatchery.example"],
            repeat_minutes=0.0,
            enabled=True,
            origin="operator",
            created_at=two_hours_ago,
            updated_at=two_hours_ago,
        )
        session.add(rule)
        for i in range(MAILS):
            session.add(
                OutboxMessage(
                    site_id=site_id,
                    kind="reminder",
                    recipients=["night-shift@hatchery.example"],
                    subject=f"Waiting mail {i}",
                    body_text="text",
                    body_html="<p>text</p>",
                    message_id=f"<claim.{i}.{site_id}@spatline.invalid>",
                    status="pending",
                    attempts=0,
                    next_attempt_at=two_hours_ago,
                    created_at=two_hours_ago,
                )
            )
        session.commit()
        rule_id = rule.id
    yield site_id, rule_id, now
    with Session(engine) as session:
        session.execute(delete(Site).where(Site.id == site_id))
        session.commit()


@pytest.fixture
def connection_a(engine):
    """A worker whose transaction the test holds open (its claims commit into savepoints)."""
    connection = engine.connect()
    transaction = connection.begin()
    yield connection, transaction
    if transaction.is_active:
        transaction.rollback()
    connection.close()


@pytest.fixture
def connection_b(engine):
    """A second worker that gives up on a lock after LOCK_TIMEOUT instead of waiting."""
    connection = engine.connect()
    connection.exec_driver_sql(f"SET lock_timeout = '{LOCK_TIMEOUT}'")
    connection.commit()
    yield connection
    connection.rollback()
    connection.close()


def _factory(connection, mode: str) -> sessionmaker[Session]:
    return sessionmaker(
        bind=connection, join_transaction_mode=mode, expire_on_commit=False, autoflush=False
    )


def test_outbox_claim_skips_rows_locked_by_an_open_claim_until_its_lease_expires(
    engine, claim_site, connection_a, connection_b
):
    site_id, _rule_id, now = claim_site
    conn_a, transaction_a = connection_a
    factory_a = _factory(conn_a, "create_savepoint")
    factory_b = _factory(connection_b, "rollback_only")

    claimed_a = claim(factory=factory_a, owner="worker-a", now=now, limit=3)
    ids_a = {row.id for row in claimed_a}
    assert len(ids_a) == 3 and {row.site_id for row in claimed_a} == {site_id}

    # A still holds its row locks: B skips those rows, gets the rest, and does not wait.
    claimed_b = claim(factory=factory_b, owner="worker-b", now=now)
    ids_b = {row.id for row in claimed_b}
    assert len(ids_b) == MAILS - 3
    assert ids_a.isdisjoint(ids_b)

    # A's claim is committed: its leases hold B off until they expire.
    transaction_a.commit()
    assert claim(factory=factory_b, owner="worker-b", now=now + dt.timedelta(seconds=5)) == []
    with Session(engine) as session:
        leases = dict(
            session.execute(
                select(OutboxMessage.id, OutboxMessage.lease_owner).where(
                    OutboxMessage.site_id == site_id
                )
            ).all()
        )
    assert {leases[i] for i in ids_a} == {"worker-a"}
    assert {leases[i] for i in ids_b} == {"worker-b"}

    expired = now + dt.timedelta(seconds=LEASE_SECONDS + 1)
    retaken = claim(factory=factory_b, owner="worker-b", now=expired)
    assert {row.id for row in retaken} == ids_a | ids_b
    assert {row.id: row.attempts for row in retaken} == dict.fromkeys(ids_a | ids_b, 2)
    assert {row.lease_owner for row in retaken} == {"worker-b"}


def _open_alerts(session: Session, rule_id: int) -> int:
    return session.scalar(
        select(func.count(Alert.id)).where(
            Alert.rule_id == rule_id,
            or_(Alert.state == "pending", Alert.state == "active", Alert.state == "acknowledged"),
        )
    )


def test_sweep_skips_rules_locked_by_an_open_sweep(engine, claim_site, connection_a, connection_b):
    _site_id, rule_id, now = claim_site
    conn_a, transaction_a = connection_a

    session_a = _factory(conn_a, "create_savepoint")()
    assert sweep(session=session_a, now=now) == 1
    assert _open_alerts(session_a, rule_id) == 1  # raised in A's open transaction

    # B's sweep at the same moment passes over the locked rule, without waiting for it.
    with _factory(connection_b, "rollback_only")() as session_b, session_b.begin():
        assert sweep(session=session_b, now=now) == 0
        assert _open_alerts(session_b, rule_id) == 0

    # A gives up (a worker that died mid-sweep): the rule is free, and B raises the alert.
    session_a.close()
    transaction_a.rollback()
    with _factory(connection_b, "rollback_only")() as session_b, session_b.begin():
        assert sweep(session=session_b, now=now) == 1
    with Session(engine) as session:
        assert _open_alerts(session, rule_id) == 1
        raised = session.scalar(
            select(func.count(OutboxMessage.id)).where(
                OutboxMessage.kind == "raised",
                OutboxMessage.alert_id.in_(select(Alert.id).where(Alert.rule_id == rule_id)),
            )
        )
        assert raised == 1
