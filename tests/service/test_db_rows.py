"""app/db_rows.py: the driver's rows equal SQLAlchemy's for the same statement."""

from __future__ import annotations

import datetime as dt

import pytest
from sqlalchemy import bindparam, select

from app.db_rows import driver_rows
from app.readings.models import Reading
from tests.stored import stored_reading

pytestmark = pytest.mark.db

AT = dt.datetime(2026, 4, 1, 6, 0, tzinfo=dt.UTC)


def test_driver_rows_equal_sqlalchemy_rows(session, make_station):
    station = make_station()
    session.add_all(
        [
            stored_reading(station, AT + dt.timedelta(minutes=m), ph=7.8, qc_overall=q)
            for m, q in ((0, 1), (1, 4), (2, 3), (3, 1))
        ]
    )
    session.flush()
    # A constant bound in the statement (the failed flag), typed times and an IN list.
    by_time = (
        select(Reading.id, Reading.ph_total)
        .where(
            Reading.station_pk == bindparam("station_pk"),
            Reading.observed_at >= bindparam("start", type_=Reading.observed_at.type),
            Reading.qc_overall != 4,
        )
        .order_by(Reading.observed_at)
    )
    listed = select(Reading.id).where(Reading.station_pk.in_(bindparam("pks", expanding=True)))
    connection = session.connection()
    parameters = {"station_pk": station.pk, "start": AT + dt.timedelta(minutes=1)}
    expected = [tuple(row) for row in connection.execute(by_time, parameters)]
    assert len(expected) == 2
    assert driver_rows(connection, by_time, parameters) == expected
    assert len(driver_rows(connection, listed, {"pks": [station.pk]})) == 4
    if connection.dialect.name == "sqlite":
        with pytest.raises(KeyError, match="station_pk"):
            driver_rows(connection, by_time, {"start": AT})
