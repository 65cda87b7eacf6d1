"""Reading the time series back: raw rows, bucketed aggregates, CSV.

Aggregation runs in SQL so that a year of minute data is not carried into Python; the
bucket expression is written per dialect (SQLite and PostgreSQL). Readings whose
overall QC flag is 4 (fail) are kept in the table but left out of every aggregate.
"""

from __future__ import annotations

import csv
import datetime as dt
import io
import re
from collections.abc import Iterable, Iterator, Sequence
from typing import Any

from sqlalchemy import BigInteger, ColumnElement, case, cast, func, literal_column, select
from sqlalchemy.orm import Session

from app.readings.models import Reading
from app.readings.qc import QcFlag
from app.readings.schemas import ReadingPublic

# Design default: the most raw rows one request returns; longer ranges use ``every``.
MAX_RAW_ROWS = 100_000

EVERY_UNITS = {"s": 1, "m": 60, "h": 3600, "d": 86400}
EVERY_PATTERN = re.compile(r"^\s*(\d+)\s*([smhd])\s*$")
MIN_EVERY = dt.timedelta(minutes=1)
MAX_EVERY = dt.timedelta(days=31)

AGGREGATED_COLUMNS: tuple[str, ...] = (
    "temperature_c",
    "salinity",
    "ph",
    "alkalinity_used_umol_kg",
    "ph_total",
    "dic_umol_kg",
    "pco2_uatm",
    "carbonate_umol_kg",
    "omega_aragonite",
    "omega_calcite",
    "omega_aragonite_uncertainty",
)
STATISTICS = ("mean", "min", "max")

READING_COLUMNS: tuple[str, ...] = tuple(ReadingPublic.model_fields)
BUCKET_COLUMNS: tuple[str, ...] = (
    "bucket_start",
    "readings",
    "failed",
    *(f"{name}_{stat}" for name in AGGREGATED_COLUMNS for stat in STATISTICS),
)


class QueryError(ValueError):
    """A query parameter outside its allowed range; the message names it."""


def parse_every(text: str) -> dt.timedelta:
    """``"15m"`` -> 15 minutes. Units s, m, h, d; from 1 minute to 31 days."""
    match = EVERY_PATTERN.match(text)
    if match is None:
        raise QueryError(
            f"every must be a number and a unit s, m, h or d (e.g. 15m, 1h, 1d); got {text!r}"
        )
    span = dt.timedelta(seconds=int(match.group(1)) * EVERY_UNITS[match.group(2)])
    if not MIN_EVERY <= span <= MAX_EVERY:
        raise QueryError(f"every must be from 1m to 31d; got {text!r}")
    return span


def time_range(
    start: dt.datetime | None, end: dt.datetime | None, *, now: dt.datetime
) -> tuple[dt.datetime, dt.datetime]:
    """The query window, default the last 24 hours; naive times are refused."""
    for name, value in (("start", start), ("end", end)):
        if value is not None and (value.tzinfo is None or value.utcoffset() is None):
            raise QueryError(
                f"{name} has no UTC offset; send e.g. 2026-06-01T00:00:00Z or "
                "2026-06-01T00:00:00-07:00"
            )
    end = (end or now).astimezone(dt.UTC)
    start = (start or end - dt.timedelta(days=1)).astimezone(dt.UTC)
    if start >= end:
        raise QueryError(f"start ({start.isoformat()}) must be before end ({end.isoformat()})")
    return start, end


def raw_readings(
    *, session: Session, station_pk: int, start: dt.datetime, end: dt.datetime
) -> list[Reading]:
    """Readings with start <= observed_at < end, oldest first (QueryError if too many)."""
    rows = list(
        session.scalars(
            select(Reading)
            .where(
                Reading.station_pk == station_pk,
                Reading.observed_at >= start,
                Reading.observed_at < end,
            )
            .order_by(Reading.observed_at, Reading.id)
            .limit(MAX_RAW_ROWS + 1)
        )
    )
    if len(rows) > MAX_RAW_ROWS:
        raise QueryError(
            f"the range holds more than {MAX_RAW_ROWS} readings; shorten start/end or "
            "aggregate with every (e.g. every=1h)"
        )
    return rows


def _epoch_seconds(session: Session) -> ColumnElement[Any]:
    if session.get_bind().dialect.name == "sqlite":
        # UtcDateTime keeps naive UTC text on SQLite, which strftime reads as UTC.
        return cast(func.strftime("%s", Reading.observed_at), BigInteger)
    return cast(func.floor(func.extract("epoch", Reading.observed_at)), BigInteger)


def aggregated_readings(
    *,
    session: Session,
    station_pk: int,
    start: dt.datetime,
    end: dt.datetime,
    every: dt.timedelta,
) -> list[dict[str, Any]]:
    """Mean, min and max per bucket of ``every``, buckets aligned to the Unix epoch (UTC).

    ``readings`` counts the readings used, ``failed`` those left out (overall flag 4).
    Buckets without any reading are not returned.
    """
    step = int(every.total_seconds())
    # Inline (an int we made): PostgreSQL's GROUP BY must see the same text as the SELECT,
    # and two bound parameters would not be the same text. ``//`` is integer division.
    bucket = (_epoch_seconds(session) // literal_column(str(step), BigInteger)).label("bucket")
    good = Reading.qc_overall != int(QcFlag.FAIL)
    columns: list[Any] = [
        bucket,
        func.sum(case((good, 1), else_=0)).label("readings"),
        func.sum(case((good, 0), else_=1)).label("failed"),
    ]
    for name in AGGREGATED_COLUMNS:
        value = case((good, getattr(Reading, name)), else_=None)
        columns += [
            func.avg(value).label(f"{name}_mean"),
            func.min(value).label(f"{name}_min"),
            func.max(value).label(f"{name}_max"),
        ]
    query = (
        select(*columns)
        .where(
            Reading.station_pk == station_pk,
            Reading.observed_at >= start,
            Reading.observed_at < end,
        )
        .group_by(bucket)
        .order_by(bucket)
    )
    epoch = dt.datetime(1970, 1, 1, tzinfo=dt.UTC)
    buckets = []
    for row in session.execute(query).mappings():
        item: dict[str, Any] = {
            "bucket_start": epoch + dt.timedelta(seconds=int(row["bucket"]) * step),
            "readings": int(row["readings"]),
            "failed": int(row["failed"]),
        }
        for name in BUCKET_COLUMNS[3:]:
            value = row[name]
            item[name] = None if value is None else float(value)
        buckets.append(item)
    return buckets


# Decimals written to CSV per variable: finer than any sensor or the engine resolves, coarse
# enough that binary float noise (2158.7200000000003) never shows. Matched by column stem,
# so the bucket columns (ph_mean, ph_min, ...) follow their variable.
CSV_DECIMALS: dict[str, int] = {
    "temperature_c": 3,
    "salinity": 3,
    "ph": 4,
    "ph_total": 4,
    "alkalinity_input_umol_kg": 1,
    "alkalinity_used_umol_kg": 1,
    "dic_umol_kg": 1,
    "pco2_uatm": 1,
    "carbonate_umol_kg": 2,
    "omega_aragonite": 3,
    "omega_calcite": 3,
    "omega_aragonite_uncertainty": 3,
}
# Any other float column: ten significant digits are past any measurement here.
_CSV_SIGNIFICANT_DIGITS = 10


def _variable(column: str) -> str:
    for stat in STATISTICS:
        if column.endswith(f"_{stat}"):
            return column.removesuffix(f"_{stat}")
    return column


def _csv_value(value: Any, column: str = "") -> Any:
    if value is None:
        return ""
    if isinstance(value, dt.datetime):
        return value.astimezone(dt.UTC).isoformat().replace("+00:00", "Z")
    if isinstance(value, float):
        decimals = CSV_DECIMALS.get(_variable(column))
        if decimals is None:
            return f"{value:.{_CSV_SIGNIFICANT_DIGITS}g}"
        # The shortest text of the rounded float: 2158.7, 7.9, 5.0 (no padding zeros).
        return repr(round(value, decimals) + 0.0)  # + 0.0 turns -0.0 into 0.0
    return value


def csv_lines(columns: Sequence[str], rows: Iterable[dict[str, Any]]) -> Iterator[str]:
    """CSV text with a header row, one line at a time (times in UTC, ISO 8601 with Z;
    numbers to the decimals of ``CSV_DECIMALS``)."""
    buffer = io.StringIO()
    writer = csv.writer(buffer, lineterminator="\r\n")

    def flush() -> str:
        text = buffer.getvalue()
        buffer.seek(0)
        buffer.truncate()
        return text

    writer.writerow(columns)
    yield flush()
    for row in rows:
        writer.writerow([_csv_value(row.get(name), name) for name in columns])
        yield flush()
