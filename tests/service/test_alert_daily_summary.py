"""The daily summary: written once per site-local day at the site's summary hour.

``write_daily_summaries(now=...)`` is driven with explicit instants around the hour, in
zones whose offset is not zero and across a daylight-saving change, and the mail's
content is checked for the previous local day's name, its figures and the caution.

Zone rules used for the hand-computed instants (the IANA tz database, "common practice"):
America/Los_Angeles is UTC-8 (PST) and from the second Sunday of March at 02:00 local UTC-7
(PDT); in 2026 that is 8 March, so 7 March 00:00 local is 08:00 UTC, 8 March 00:00 local is
08:00 UTC and 9 March 00:00 local is 07:00 UTC (8 March has 23 hours). Pacific/Auckland is
UTC+13 (NZDT) in January.
"""

from __future__ import annotations

import datetime as dt
import statistics

import pytest
from sqlalchemy import select

import chemistry
from app.alerts.models import AlertRule, DailySummaryRecord, OutboxMessage
from app.alerts.summary import write_daily_summaries
from app.readings.models import Reading
from tests.stored import stored_reading

pytestmark = pytest.mark.db

RECIPIENT = "manager@hatchery.example"


def utc(text: str) -> dt.datetime:
    return dt.datetime.fromisoformat(text).replace(tzinfo=dt.UTC)


def _store(session, station, at: dt.datetime, ph: float, *, failed: bool = False) -> Reading:
    temperature = 10.0 + ph  # a distinct temperature per reading, for the figures
    reading = stored_reading(
        station,
        at,
        ph=ph,
        temperature=temperature,
        source="dev_summary",
        omega_aragonite_uncertainty=0.1,
        qc_ph=4 if failed else 1,
        qc_overall=4 if failed else 1,
    )
    session.add(reading)
    session.flush()
    return reading


@pytest.fixture
def la_site(session, make_site, make_station, make_tank):
    site = make_site(timezone="America/Los_Angeles", daily_summary_hour=6)
    station = make_station(site=site, role="intake", alkalinity={"mode": "fixed", "value": 2200})
    tank = make_tank(site=site, station=station)
    for rule in session.scalars(select(AlertRule).where(AlertRule.tank_pk == tank.pk)):
        rule.recipients = [RECIPIENT]
    session.commit()
    return site, station


def _records(session, site) -> list[DailySummaryRecord]:
    return list(
        session.scalars(
            select(DailySummaryRecord)
            .where(DailySummaryRecord.site_id == site.id)
            .order_by(DailySummaryRecord.local_date)
        )
    )


def _figure_line(label: str, values: list[float], digits: int) -> str:
    return (
        f"  {label}: min {min(values):.{digits}f}, mean {statistics.fmean(values):.{digits}f}, "
        f"max {max(values):.{digits}f}"
    )


def test_summary_at_the_local_hour_once_per_day_across_spring_forward(session, la_site):
    site, station = la_site
    # 6 March 23:59 PST: the day before, not in the 7 March figures.
    _store(session, station, utc("2026-03-07T07:59"), 7.60)
    day7 = [
        _store(session, station, utc("2026-03-07T08:00"), 7.70),  # 7 March 00:00 PST
        _store(session, station, utc("2026-03-07T20:00"), 7.90),
        _store(session, station, utc("2026-03-08T07:59"), 8.00),  # 7 March 23:59 PST
    ]
    _store(session, station, utc("2026-03-07T12:00"), 7.20, failed=True)  # QC fail: left out
    day8 = [
        _store(session, station, utc("2026-03-08T08:00"), 7.80),  # 8 March 00:00 PST
        _store(session, station, utc("2026-03-09T06:59"), 7.85),  # 8 March 23:59 PDT
    ]
    # 9 March 00:30 PDT: inside a 24-hour window from 8 March 00:00, outside the 23-hour day.
    _store(session, station, utc("2026-03-09T07:30"), 7.65)
    session.commit()

    # 8 March 05:59 PDT (the hour before): nothing. At a fixed -8 offset 13:00 UTC would
    # still be 05:00, so the next call also tells whether the zone's DST rule is used.
    write_daily_summaries(session=session, now=utc("2026-03-08T12:59"))
    assert _records(session, site) == []
    write_daily_summaries(session=session, now=utc("2026-03-08T13:00"))  # 06:00 PDT
    [first] = _records(session, site)
    assert first.local_date == dt.date(2026, 3, 8)
    # Later the same local day (up to 23:59 PDT = 06:59 UTC on 9 March): not again.
    for later in ("2026-03-08T13:30", "2026-03-08T23:00", "2026-03-09T06:59", "2026-03-09T12:59"):
        write_daily_summaries(session=session, now=utc(later))
    assert len(_records(session, site)) == 1

    mail = session.get(OutboxMessage, first.outbox_id)
    assert (mail.kind, mail.recipients, mail.status) == ("daily_summary", [RECIPIENT], "pending")
    assert mail.subject == f"[{site.name}] Daily summary for 2026-03-07"
    text = mail.body_text
    assert "Day: 2026-03-07 (America/Los_Angeles)" in text
    assert f"Station {station.name} ({station.id}): 3 good readings" in text
    assert _figure_line("omega aragonite", [r.omega_aragonite for r in day7], 2) in text
    assert _figure_line("pH total", [r.ph_total for r in day7], 3) in text
    assert _figure_line("temperature (°C)", [r.temperature_c for r in day7], 1) in text
    assert f"/sites/{site.id}/days/2026-03-07" in text
    assert chemistry.DOSING_CAUTION in text
    assert first.details["day"] == "2026-03-07"
    assert first.details["stations"][station.id]["readings"] == 3

    # 9 March 06:00 PDT is 13:00 UTC: the 23-hour 8 March.
    write_daily_summaries(session=session, now=utc("2026-03-09T13:00"))
    records = _records(session, site)
    assert [r.local_date for r in records] == [dt.date(2026, 3, 8), dt.date(2026, 3, 9)]
    second = session.get(OutboxMessage, records[1].outbox_id)
    assert second.subject == f"[{site.name}] Daily summary for 2026-03-08"
    assert f"Station {station.name} ({station.id}): 2 good readings" in second.body_text
    assert _figure_line("pH total", [r.ph_total for r in day8], 3) in second.body_text
    assert chemistry.DOSING_CAUTION in second.body_text
    assert first.outbox_id != records[1].outbox_id
    assert mail.message_id != second.message_id


def test_summary_east_of_utc_names_the_local_yesterday(session, make_site, make_station):
    site = make_site(timezone="Pacific/Auckland", daily_summary_hour=7)
    station = make_station(site=site, role="intake", alkalinity={"mode": "fixed", "value": 2200})
    # 14 January 12:00 NZDT is 13 January 23:00 UTC: a reading of the local 14th.
    reading = _store(session, station, utc("2026-01-13T23:00"), 7.95)
    session.commit()
    # 15 January 06:59 NZDT (14 January 17:59 UTC): the hour before, nothing.
    write_daily_summaries(session=session, now=utc("2026-01-14T17:59"))
    assert _records(session, site) == []
    # 15 January 07:00 NZDT: the summary of the local 14th (the UTC date is still the 14th).
    write_daily_summaries(session=session, now=utc("2026-01-14T18:00"))
    [record] = _records(session, site)
    assert record.local_date == dt.date(2026, 1, 15)
    mail = session.get(OutboxMessage, record.outbox_id)
    assert mail.subject == f"[{site.name}] Daily summary for 2026-01-14"
    assert "Day: 2026-01-14 (Pacific/Auckland)" in mail.body_text
    assert f"({station.id}): 1 good readings" in mail.body_text
    assert _figure_line("pH total", [reading.ph_total], 3) in mail.body_text
    assert chemistry.DOSING_CAUTION in mail.body_text
    # No rule, no recipient: the summary is kept and listed, not sent anywhere.
    assert (mail.recipients, mail.status) == ([], "unaddressed")
