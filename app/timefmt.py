"""One way to write times in answers: ISO 8601 in UTC with ``Z``.

Pydantic writes a UTC datetime with ``Z`` and any other offset as given; FastAPI's
``jsonable_encoder`` writes ``+00:00``. Answers built as dicts go through
:func:`json_body`, and public schemas type their times :data:`UtcDatetime`, so a client
sees ``2026-06-01T12:00:00Z`` everywhere, whatever offset a time was posted with.
"""

from __future__ import annotations

import datetime as dt
from typing import Annotated, Any

from fastapi.encoders import jsonable_encoder
from pydantic import AfterValidator


def as_utc(value: dt.datetime) -> dt.datetime:
    """The same instant in UTC (a naive value is taken as UTC, as the database stores it)."""
    if value.tzinfo is None or value.utcoffset() is None:
        return value.replace(tzinfo=dt.UTC)
    return value.astimezone(dt.UTC)


def utc_iso(value: dt.datetime) -> str:
    """``2026-06-01T12:00:00Z`` (fractions of a second kept when present)."""
    return as_utc(value).isoformat().replace("+00:00", "Z")


#: A datetime that a public schema holds, and so writes, in UTC.
UtcDatetime = Annotated[dt.datetime, AfterValidator(as_utc)]


def json_body(content: Any) -> Any:
    """``jsonable_encoder`` with every datetime written by :func:`utc_iso`.

    Plain dicts, lists, tuples, strings, numbers, ``None`` and datetimes (the status is
    a few thousand of them) are walked here, several times faster; anything else goes to
    ``jsonable_encoder`` itself, so the result is the same (keys starting with ``_sa``
    left out, as it does).
    """
    return _encode(content)


_PLAIN = frozenset((str, int, float, bool, type(None)))


def _encode(value: Any) -> Any:
    kind = type(value)
    if kind in _PLAIN:
        return value
    if kind is dict:
        if all(type(key) is str for key in value):
            return {
                key: _encode(item) for key, item in value.items() if not key.startswith("_sa")
            }
    elif kind is list or kind is tuple:
        return [_encode(item) for item in value]
    elif kind is dt.datetime:
        return utc_iso(value)
    return jsonable_encoder(value, custom_encoder={dt.datetime: utc_iso})
