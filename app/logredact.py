"""Keep API keys out of the logs, even when a client puts one where it does not belong.

Keys travel in the ``Authorization`` header, which no log line prints. But a client may
put a key in a query string (``?key=spl_...``), and uvicorn's access log prints the whole
path; a key pasted into a body field may come back in an error. The filter below rewrites
anything shaped like a key in every log record.
"""

from __future__ import annotations

import logging
import re
from typing import Any

from app.auth.keys import KEY_PREFIX

# The prefix and at least eight key characters: short enough to catch a truncated key,
# long enough to leave words like "spl_" in prose alone.
KEY_PATTERN = re.compile(re.escape(KEY_PREFIX) + r"[A-Za-z0-9_\-]{8,}")
REDACTED = KEY_PREFIX + "[redacted]"


def redact(value: Any) -> Any:
    if isinstance(value, str):
        return KEY_PATTERN.sub(REDACTED, value)
    return value


def _redact_record(record: logging.LogRecord) -> None:
    if isinstance(record.msg, str):
        record.msg = redact(record.msg)
    if isinstance(record.args, tuple):
        record.args = tuple(redact(arg) for arg in record.args)
    elif isinstance(record.args, dict):
        record.args = {key: redact(arg) for key, arg in record.args.items()}


def install_key_redaction() -> None:
    """Redact key-shaped text in every log record made from now on, by any logger.

    A record factory rather than a logger filter: filters on a logger do not see records
    of its children, and uvicorn's loggers are configured after import. Calling this
    again is harmless.
    """
    current = logging.getLogRecordFactory()
    if getattr(current, "redacts_keys", False):
        return

    def factory(*args: Any, **kwargs: Any) -> logging.LogRecord:
        record = current(*args, **kwargs)
        _redact_record(record)
        return record

    factory.redacts_keys = True  # type: ignore[attr-defined]
    logging.setLogRecordFactory(factory)
