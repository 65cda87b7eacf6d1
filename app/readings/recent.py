"""What QC read last of each station's stored readings, kept by the process (SQLite only).

QC tests new readings against some 31 hours of the station's stored values (the rate of
change looks back a day and a gap more). A station posting every minute in batches sends
requests whose windows overlap almost entirely, and reading the overlap again is a fifth
of an ingest. So after each committed ingest the process keeps, per station, the values QC
read plus the rows the request stored, and the next request of that station reads from the
database only what lies outside them.

Why the kept values can be trusted:

- a stored reading's values never change (only its QC flags do, and those are always read
  from the database) and a reading is deleted only with its station, whose ``created_at`` is
  part of the key;
- SQLite gives every new row the largest rowid plus one, and the ingest holds the write lock
  from its first statement to its commit, so the largest id of the readings table names the
  table's state: the kept values are used only when it is still the one they were made at.
  Any other writer (another worker process, a test writing ORM rows, the importer) moves it
  and the next request reads everything again.

PostgreSQL hands out ids from a sequence in no commit order, so this memory is not used
there. Entries are staged in the session and kept only when its outermost transaction
commits (not when a savepoint is released); any rollback drops them.
"""

from __future__ import annotations

import threading
from collections import OrderedDict
from collections.abc import Hashable, Mapping
from dataclasses import dataclass
from typing import Any

import numpy as np
from sqlalchemy import event
from sqlalchemy.orm import Session

#: Stations remembered per process (least recently used dropped first).
MAX_STATIONS = 256

#: The columns kept, as ``_context_arrays`` of app.readings.ingest names them (the ingest
#: reads the same columns from the table, the time as its stored text).
VALUE_COLUMNS = (
    "seconds",
    "temperature_c",
    "salinity",
    "ph",
    "alkalinity_input_umol_kg",
    "from_station",
    "available",
)

_STAGED_KEY = "spatline.recent_values"


@dataclass(frozen=True)
class RecentValues:
    """Every stored reading of a station observed from ``lo_us`` to ``hi_us`` (microseconds
    since 1970, both included), as QC's value columns in time order (``seconds`` as
    ``_sqlite_seconds`` gives them), at the moment the readings table's largest id was
    ``table_max_id``."""

    lo_us: int
    hi_us: int
    table_max_id: int
    columns: Mapping[str, np.ndarray]


_entries: OrderedDict[Hashable, RecentValues] = OrderedDict()
_lock = threading.Lock()


def recall(key: Hashable, *, start_us: int, table_max_id: int) -> RecentValues | None:
    """The kept values of ``key`` when they are still the table's and begin at or before
    ``start_us``; else None."""
    with _lock:
        entry = _entries.get(key)
        if entry is None:
            return None
        if entry.table_max_id != table_max_id or entry.lo_us > start_us:
            return None
        _entries.move_to_end(key)
        return entry


def stage(session: Session, key: Hashable, entry: RecentValues) -> None:
    """Keep ``entry`` for ``key`` if and when ``session`` commits. Its arrays become
    read-only: later requests get views of them, and a write would change what they see."""
    for values in entry.columns.values():
        values.flags.writeable = False
    session.info.setdefault(_STAGED_KEY, {})[key] = entry


def between(entry: RecentValues, start_us: int, end_us: int) -> dict[str, np.ndarray]:
    """The kept columns of the readings observed from ``start_us`` to ``end_us``."""
    seconds = entry.columns["seconds"]
    # Microseconds over 1e6 round the way the kept seconds were made (one correctly
    # rounded division), and distinct microseconds stay distinct in a double.
    low = int(np.searchsorted(seconds, start_us / 1e6, side="left"))
    high = int(np.searchsorted(seconds, end_us / 1e6, side="right"))
    return {name: values[low:high] for name, values in entry.columns.items()}


def joined(parts: list[Mapping[str, np.ndarray]]) -> dict[str, np.ndarray]:
    """Columns of several row sets, one after the other, put in time order (a stable sort:
    of readings at the same time, the earlier set's come first)."""
    columns = {name: np.concatenate([part[name] for part in parts]) for name in VALUE_COLUMNS}
    seconds = columns["seconds"]
    if seconds.size > 1 and np.any(seconds[1:] < seconds[:-1]):
        order = np.argsort(seconds, kind="stable")
        columns = {name: values[order] for name, values in columns.items()}
    return columns


def forget(key: Hashable) -> None:
    """Drop the entry of ``key`` (its values disagreed with the table)."""
    with _lock:
        _entries.pop(key, None)


def forget_all() -> None:
    """Drop every kept entry (the tests start from an empty memory)."""
    with _lock:
        _entries.clear()


@event.listens_for(Session, "after_commit")
def _keep_staged(session: Session) -> None:
    if session.in_nested_transaction():  # a savepoint released: nothing is committed yet
        return
    staged: dict[Hashable, RecentValues] = session.info.pop(_STAGED_KEY, None) or {}
    if not staged:
        return
    with _lock:
        for key, entry in staged.items():
            _entries[key] = entry
            _entries.move_to_end(key)
        while len(_entries) > MAX_STATIONS:
            _entries.popitem(last=False)


@event.listens_for(Session, "after_rollback")
def _drop_staged(session: Session) -> None:
    # Any rollback, a savepoint's too: dropping what may still commit only costs a read.
    session.info.pop(_STAGED_KEY, None)


@event.listens_for(Session, "after_transaction_end")
def _drop_unkept(session: Session, transaction: Any) -> None:
    # The outermost transaction ended without a commit (a session closed with its work
    # undone): what it staged must not be kept by a later commit of the same session.
    if transaction.parent is None:
        session.info.pop(_STAGED_KEY, None)


def entry_count() -> int:
    with _lock:
        return len(_entries)
