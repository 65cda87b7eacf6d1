"""Which site-local days a status may be asked for.

A status describes a day that has begun: from 1 January 2000 (older than any data this
service can hold from a sensor still in use) up to today in the site's time zone. A later
day has no readings yet, and a date near the calendar's end cannot be turned into a UTC
window at all, so both are refused with a sentence instead of failing deep in the
computation.
"""

from __future__ import annotations

import datetime as dt
from zoneinfo import ZoneInfo

EARLIEST_STATUS_DAY = dt.date(2000, 1, 1)


class StatusDayError(ValueError):
    """A status day outside the allowed range; the message is a sentence for the user."""


def site_today(timezone: str, now: dt.datetime) -> dt.date:
    return now.astimezone(ZoneInfo(timezone)).date()


def check_status_day(day: dt.date | None, *, timezone: str, now: dt.datetime) -> None:
    """Raise :class:`StatusDayError` naming ``date`` and its range when ``day`` is outside it."""
    if day is None:
        return
    today = site_today(timezone, now)
    if EARLIEST_STATUS_DAY <= day <= today:
        return
    raise StatusDayError(
        f"date must be a site-local day from {EARLIEST_STATUS_DAY.isoformat()} up to today "
        f"({today.isoformat()} in {timezone}); got {day.isoformat()}."
    )
