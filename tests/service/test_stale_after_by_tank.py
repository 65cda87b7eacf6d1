"""The status's one-query look-up of every tank's no-data window, against the per-tank one."""

from __future__ import annotations

import datetime as dt

import pytest

from app.alerts.advice import (
    no_data_window_minutes,
    stale_after_by_tank,
    stale_after_minutes,
)
from app.alerts.models import AlertRule
from app.alerts.rules import DEFAULT_SILENCE_MINUTES

pytestmark = pytest.mark.db


def _no_data_rule(session, site, *, level, station=None, tank=None, metric="no_data", **extra):
    now = dt.datetime.now(dt.UTC)
    rule = AlertRule(
        site_id=site.id,
        station_pk=None if station is None else station.pk,
        tank_pk=None if tank is None else tank.pk,
        metric=metric,
        direction="above",
        level=level,
        clear_level=level,
        recipients=[],
        created_at=now,
        updated_at=now,
        **extra,
    )
    session.add(rule)
    session.flush()
    return rule


def test_one_query_gives_each_tank_the_same_window_as_the_per_tank_look_up(
    session, make_site, make_station, make_tank
):
    site = make_site()
    first = make_station(site=site)
    second = make_station(site=site, role="treated")
    on_first = make_tank(site=site, station=first)
    own_rule = make_tank(site=site, station=first)
    on_second = make_tank(site=site, station=second)
    _no_data_rule(session, site, level=20.0, station=first)
    _no_data_rule(session, site, level=10.0, tank=own_rule)
    # Not counted: disabled, deleted, or another metric.
    _no_data_rule(session, site, level=5.0, station=second, enabled=False)
    _no_data_rule(session, site, level=3.0, tank=on_second, deleted_at=dt.datetime.now(dt.UTC))
    _no_data_rule(session, site, level=2.0, station=second, metric="omega_aragonite")
    tanks = [on_first, own_rule, on_second]

    windows = stale_after_by_tank(session=session, tanks=tanks)

    # The per-station look-up the alert sweep uses, asked for each tank, agrees.
    assert windows == {
        t.pk: no_data_window_minutes(session=session, station_pk=t.source_station_pk, tank_pk=t.pk)
        for t in tanks
    }
    assert stale_after_minutes(session=session, tank=own_rule) == 10.0
    # The station's rule, the tank's own shorter rule, and the default (design default).
    assert windows == {on_first.pk: 20.0, own_rule.pk: 10.0, on_second.pk: DEFAULT_SILENCE_MINUTES}
    assert stale_after_by_tank(session=session, tanks=[]) == {}
