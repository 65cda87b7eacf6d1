"""Status for a day that has not begun, or one the calendar cannot hold: a sentence, not a 500.

The range (from 2000-01-01 up to today in the site's time zone) is the service's own rule,
documented in ``app/status/days.py``.
"""

from __future__ import annotations

import datetime as dt
from zoneinfo import ZoneInfo

import pytest

from app.status.days import StatusDayError, check_status_day

pytestmark = pytest.mark.db

ZONE = "Pacific/Auckland"  # far ahead of UTC, so "today" there is often tomorrow in UTC


def _today(zone: str = ZONE) -> dt.date:
    return dt.datetime.now(dt.UTC).astimezone(ZoneInfo(zone)).date()


def test_the_range_is_inclusive_at_both_ends_in_the_site_zone():
    now = dt.datetime(2026, 12, 1, 22, 0, tzinfo=dt.UTC)  # 2 December 11:00 in Auckland
    check_status_day(dt.date(2026, 12, 2), timezone=ZONE, now=now)
    check_status_day(dt.date(2000, 1, 1), timezone=ZONE, now=now)
    check_status_day(None, timezone=ZONE, now=now)
    with pytest.raises(StatusDayError, match=r"date must be .*2000-01-01.*2026-12-02"):
        check_status_day(dt.date(2026, 12, 3), timezone=ZONE, now=now)
    with pytest.raises(StatusDayError, match="got 1999-12-31"):
        check_status_day(dt.date(1999, 12, 31), timezone=ZONE, now=now)


@pytest.mark.parametrize("days_ahead", [1, 365])
def test_api_refuses_a_future_day_with_a_sentence(client, viewer_headers, make_site,
                                                  days_ahead):
    site = make_site(timezone=ZONE)
    day = _today() + dt.timedelta(days=days_ahead)
    answer = client.get(f"/api/v1/sites/{site.id}/status", params={"date": day.isoformat()},
                        headers=viewer_headers)
    assert answer.status_code == 422, answer.text
    detail = answer.json()["detail"]
    assert detail.startswith("date must be a site-local day from 2000-01-01 up to today")
    assert _today().isoformat() in detail and day.isoformat() in detail


@pytest.mark.parametrize("day", ["9999-12-31", "0001-01-01", "1999-12-31"])
def test_api_refuses_days_the_calendar_cannot_window(client, viewer_headers, make_site, day):
    site = make_site(timezone=ZONE)
    answer = client.get(f"/api/v1/sites/{site.id}/status", params={"date": day},
                        headers=viewer_headers)
    assert answer.status_code == 422, answer.text
    assert "date must be" in answer.json()["detail"] and day in answer.json()["detail"]


def test_api_still_answers_today(client, viewer_headers, make_site):
    site = make_site(timezone=ZONE)
    answer = client.get(f"/api/v1/sites/{site.id}/status",
                        params={"date": _today().isoformat()}, headers=viewer_headers)
    assert answer.status_code == 200, answer.text
    assert answer.json()["date"] == _today().isoformat()


@pytest.mark.parametrize("day", ["tomorrow", "9999-12-31", "2026-02-30"])
def test_web_day_page_explains_a_refused_day(client, viewer_key, make_site, day):
    site = make_site(timezone=ZONE)
    if day == "tomorrow":
        day = (_today() + dt.timedelta(days=1)).isoformat()
    client.post("/sign-in", data={"key": viewer_key}, follow_redirects=False)
    page = client.get(f"/sites/{site.id}/days/{day}")
    assert page.status_code == 422
    assert "text/html" in page.headers["content-type"]
    assert "no status for that day" in page.text
    assert day in page.text and _today().isoformat() in page.text
