"""``spatline import FILE.csv --station SITE/STATION``: load a logger's CSV export.

The file needs a header row; options map its columns to reading fields. Rows go through
the same ``ingest_readings`` as ``POST /readings`` (source ``"import"``), in batches that
are committed one by one, so an interrupted import can simply be run again: rows already
stored count as duplicates and nothing is stored twice. Rows that cannot be read are
reported by line number and the good rows are stored.
"""

from __future__ import annotations

import argparse
import csv
import datetime as dt
import sys
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any, TextIO
from zoneinfo import ZoneInfo, ZoneInfoNotFoundError

from sqlalchemy.orm import Session
from tqdm import tqdm

from app.readings.schemas import PH_SCALES
from app.sites.models import Station

IMPORT_SOURCE = "import"
DEFAULT_BATCH = 1000
# Beyond this many, row errors are counted but not printed one by one.
MAX_PRINTED_ERRORS = 200

# Reading field -> (option name, default column name).
COLUMN_OPTIONS: dict[str, tuple[str, str]] = {
    "observed_at": ("time_column", "observed_at"),
    "reading_id": ("id_column", "reading_id"),
    "temperature_c": ("temperature_column", "temperature_c"),
    "salinity": ("salinity_column", "salinity"),
    "ph": ("ph_column", "ph"),
    "alkalinity": ("alkalinity_column", "alkalinity"),
}
MEASUREMENTS = ("temperature_c", "salinity", "ph", "alkalinity")


class ImportSetupError(ValueError):
    """The file or the options cannot be used at all (nothing was imported)."""


@dataclass(frozen=True)
class ImportOptions:
    ph_scale: str
    columns: dict[str, str | None]
    alkalinity_unit: str = "umol_kg"
    timezone: str | None = None
    time_format: str | None = None
    delimiter: str = ","
    encoding: str = "utf-8-sig"
    batch_size: int = DEFAULT_BATCH


@dataclass
class ImportReport:
    rows: int = 0
    accepted: int = 0
    duplicates: int = 0
    errors: list[tuple[int, str]] = field(default_factory=list)

    @property
    def rejected_lines(self) -> int:
        return len({line for line, _ in self.errors})


def _resolve_columns(
    header: Sequence[str], requested: dict[str, str | None], explicit: set[str]
) -> dict[str, str]:
    """Map reading fields to header names; explicit options must exist, defaults may not."""
    present = {name.strip(): name for name in header}
    resolved: dict[str, str] = {}
    for reading_field, column in requested.items():
        if column is None:
            continue
        if column in present:
            resolved[reading_field] = present[column]
        elif reading_field in explicit or reading_field == "observed_at":
            option = COLUMN_OPTIONS[reading_field][0].replace("_", "-")
            raise ImportSetupError(
                f"--{option}: the file has no column {column!r}; its columns are "
                f"{', '.join(repr(h) for h in header)}"
            )
    if not any(name in resolved for name in MEASUREMENTS):
        raise ImportSetupError(
            "the file has none of the measurement columns (temperature, salinity, pH, "
            "alkalinity); name them with --temperature-column, --salinity-column, "
            "--ph-column or --alkalinity-column"
        )
    return resolved


def _time_parser(options: ImportOptions) -> Callable[[str], str]:
    zone = None
    if options.timezone is not None:
        try:
            zone = ZoneInfo(options.timezone)
        except (ZoneInfoNotFoundError, ValueError):
            raise ImportSetupError(
                f"--timezone: {options.timezone!r} is not an IANA time zone name "
                "(e.g. UTC, Europe/Lisbon, America/Vancouver)"
            ) from None

    def parse(text: str) -> str:
        text = text.strip()
        try:
            moment = (
                dt.datetime.strptime(text, options.time_format)
                if options.time_format
                else dt.datetime.fromisoformat(text)
            )
        except ValueError as error:
            expected = options.time_format or "ISO 8601, e.g. 2026-06-01T05:00:00-07:00"
            reason = str(error)
            if "out of range" in reason or "must be in" in reason:
                # It has the right shape, but names a day or hour the calendar lacks.
                raise ValueError(f"time {text!r} is not a valid date or time ({reason})") from None
            raise ValueError(f"time {text!r} does not match {expected}") from None
        if moment.tzinfo is None:
            if zone is None:
                raise ValueError(
                    f"time {text!r} has no UTC offset; give --timezone for the logger's zone"
                )
            # In the repeated hour of a clock change the first occurrence is taken (fold 0).
            moment = moment.replace(tzinfo=zone)
        return moment.isoformat()

    return parse


def _number(text: str, column: str) -> float | None:
    text = text.strip()
    if text == "":
        return None
    try:
        return float(text)
    except ValueError:
        raise ValueError(f"column {column!r}: {text!r} is not a number") from None


def _rows_to_items(
    rows: Iterable[tuple[int, dict[str, str]]],
    columns: dict[str, str],
    options: ImportOptions,
    parse_time: Callable[[str], str],
) -> Iterable[tuple[int, dict[str, Any] | str]]:
    """(line, reading dict) for readable rows, (line, error sentence) for the others."""
    alkalinity_field = (
        "alkalinity_mg_l_caco3" if options.alkalinity_unit == "mg_l_caco3" else "alkalinity_umol_kg"
    )
    for line, row in rows:
        try:
            item: dict[str, Any] = {
                "observed_at": parse_time(row.get(columns["observed_at"]) or "")
            }
            if "reading_id" in columns and (row.get(columns["reading_id"]) or "").strip():
                item["reading_id"] = row[columns["reading_id"]].strip()
            for reading_field in ("temperature_c", "salinity", "ph"):
                if reading_field in columns:
                    value = _number(row.get(columns[reading_field]) or "", columns[reading_field])
                    if value is not None:
                        item[reading_field] = value
            if "ph" in item:
                item["ph_scale"] = options.ph_scale
            if "alkalinity" in columns:
                value = _number(row.get(columns["alkalinity"]) or "", columns["alkalinity"])
                if value is not None:
                    item[alkalinity_field] = value
        except ValueError as error:
            yield line, str(error)
            continue
        yield line, item


def import_csv(
    *,
    session: Session,
    station: Station,
    path: Path,
    options: ImportOptions,
    explicit_columns: set[str] | None = None,
    now: Callable[[], dt.datetime] | None = None,
    progress: bool = True,
    commit: bool = True,
) -> ImportReport:
    """Import a CSV file into ``station``; returns counts and per-line errors.

    Raises ``ImportSetupError`` when the file or options are unusable as a whole.
    """
    from app.db import utcnow
    from app.readings.ingest import ingest_readings

    clock = now or utcnow
    try:
        handle: TextIO = path.open(newline="", encoding=options.encoding)
    except OSError as error:
        raise ImportSetupError(f"cannot open {str(path)!r}: {error.strerror}") from None
    with handle:
        reader = csv.DictReader(handle, delimiter=options.delimiter)
        if reader.fieldnames is None:
            raise ImportSetupError(f"{str(path)!r} is empty; a header row is needed")
        columns = _resolve_columns(reader.fieldnames, options.columns, explicit_columns or set())
        parse_time = _time_parser(options)
        # The header is line 1; DictReader's line_num follows quoted line breaks too.
        rows = [(reader.line_num, row) for row in reader]

    report = ImportReport(rows=len(rows))
    batch: list[dict[str, Any]] = []
    batch_lines: list[int] = []

    def flush() -> None:
        if not batch:
            return
        result = ingest_readings(
            session=session, station=station, source=IMPORT_SOURCE, items=batch, now=clock()
        )
        if commit:
            session.commit()
        report.accepted += result.accepted
        report.duplicates += result.duplicates
        for rejected in result.rejected:
            for message in rejected.errors:
                report.errors.append((batch_lines[rejected.index], message))
        batch.clear()
        batch_lines.clear()

    with tqdm(
        total=len(rows), unit="rows", desc="importing", disable=not progress, file=sys.stderr
    ) as bar:
        for line, item in _rows_to_items(rows, columns, options, parse_time):
            if isinstance(item, str):
                report.errors.append((line, item))
            else:
                batch.append(item)
                batch_lines.append(line)
                if len(batch) >= options.batch_size:
                    flush()
            bar.update(1)
        flush()
    report.errors.sort()
    return report


# --- command line ------------------------------------------------------------------------


def register(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser(
        "import",
        help="import a logger's CSV export into a station",
        description=(
            "Import readings from a CSV file with a header row. Rows that cannot be read are "
            "listed by line number; good rows are stored. Importing the same file again "
            "stores nothing twice."
        ),
    )
    parser.add_argument("file", type=Path, metavar="FILE.csv")
    parser.add_argument(
        "--station", required=True, metavar="SITE/STATION", help="e.g. north-bay/intake"
    )
    parser.add_argument(
        "--ph-scale",
        required=True,
        choices=PH_SCALES,
        help="scale of the pH column (nbs for a glass electrode calibrated with NBS buffers)",
    )
    for reading_field, (option, default) in COLUMN_OPTIONS.items():
        parser.add_argument(
            f"--{option.replace('_', '-')}",
            dest=option,
            default=None,
            metavar="NAME",
            help=f"column holding {reading_field} (default {default!r})",
        )
    parser.add_argument(
        "--alkalinity-unit",
        choices=("umol_kg", "mg_l_caco3"),
        default="umol_kg",
        help="unit of the alkalinity column (default umol_kg)",
    )
    parser.add_argument(
        "--timezone",
        metavar="ZONE",
        help="IANA zone of times written without an offset, e.g. America/Vancouver",
    )
    parser.add_argument(
        "--time-format",
        metavar="FORMAT",
        help="strptime format of the time column, e.g. '%%d/%%m/%%Y %%H:%%M' (default ISO 8601)",
    )
    parser.add_argument("--delimiter", default=",", help="field separator (default ',')")
    parser.add_argument("--encoding", default="utf-8-sig", help="text encoding (default UTF-8)")
    parser.add_argument(
        "--batch-size",
        type=int,
        default=DEFAULT_BATCH,
        help=f"rows stored per transaction, 1 to 5000 (default {DEFAULT_BATCH})",
    )
    parser.add_argument("--quiet", action="store_true", help="no progress bar")
    parser.set_defaults(handler=_run)


def _options_from(args: argparse.Namespace) -> tuple[ImportOptions, set[str]]:
    if not 1 <= args.batch_size <= 5000:
        raise ImportSetupError(f"--batch-size must be from 1 to 5000; got {args.batch_size}")
    if len(args.delimiter) != 1:
        raise ImportSetupError(f"--delimiter must be one character; got {args.delimiter!r}")
    columns: dict[str, str | None] = {}
    explicit: set[str] = set()
    for reading_field, (option, default) in COLUMN_OPTIONS.items():
        given = getattr(args, option)
        if given is not None:
            explicit.add(reading_field)
        columns[reading_field] = given if given is not None else default
    options = ImportOptions(
        ph_scale=args.ph_scale,
        columns=columns,
        alkalinity_unit=args.alkalinity_unit,
        timezone=args.timezone,
        time_format=args.time_format,
        delimiter=args.delimiter,
        encoding=args.encoding,
        batch_size=args.batch_size,
    )
    return options, explicit


def _run(args: argparse.Namespace) -> int:
    from sqlalchemy.exc import OperationalError, ProgrammingError

    from app.cli.server import load_settings
    from app.db import make_engine, make_sessionmaker
    from app.sites import service as sites_service

    site_id, _, station_id = args.station.partition("/")
    if not site_id or not station_id:
        print(
            f"spatline import: --station must be SITE/STATION; got {args.station!r}",
            file=sys.stderr,
        )
        return 2
    try:
        options, explicit = _options_from(args)
    except ImportSetupError as error:
        print(f"spatline import: {error}", file=sys.stderr)
        return 2

    engine = make_engine(load_settings())
    try:
        with make_sessionmaker(engine)() as session:
            station = sites_service.get_station(
                session=session, site_id=site_id, station_id=station_id
            )
            if station is None:
                print(
                    f"spatline import: there is no station {station_id!r} at site {site_id!r}",
                    file=sys.stderr,
                )
                return 2
            session.commit()  # end the read so each batch starts its own write transaction
            report = import_csv(
                session=session,
                station=station,
                path=args.file,
                options=options,
                explicit_columns=explicit,
                progress=not args.quiet,
            )
    except ImportSetupError as error:
        print(f"spatline import: {error}", file=sys.stderr)
        return 2
    except (OperationalError, ProgrammingError) as error:
        print(
            f"spatline import: the database is not ready ({error.orig}); run `spatline migrate`.",
            file=sys.stderr,
        )
        return 2
    finally:
        engine.dispose()

    for line, message in report.errors[:MAX_PRINTED_ERRORS]:
        print(f"{args.file}:{line}: {message}", file=sys.stderr)
    if len(report.errors) > MAX_PRINTED_ERRORS:
        print(f"... and {len(report.errors) - MAX_PRINTED_ERRORS} more errors", file=sys.stderr)
    print(
        f"{report.rows} rows: {report.accepted} stored, {report.duplicates} already stored, "
        f"{report.rejected_lines} rejected."
    )
    return 1 if report.errors else 0
