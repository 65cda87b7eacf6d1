"""Rule evaluation: on every ingest (inside the ingest transaction) and by the sweep."""

from __future__ import annotations

from collections.abc import Sequence
from datetime import datetime
from typing import Any


def evaluate_after_ingest(
    *, session: Any, station: Any, readings: Sequence[Any], now: datetime
) -> None:
    """Evaluate every rule that watches ``station`` (or a tank fed by it) on new readings.

    Called by the readings ingest inside its own transaction, after the readings are
    flushed, so that an alert change and its outbox mail commit (or roll back) together
    with the readings. ``readings`` are the newly stored reading rows of this station;
    ``now`` is the ingest time (UTC).

    The rule tables land in migration 0002; until then there is nothing to evaluate.
    """
    return None
