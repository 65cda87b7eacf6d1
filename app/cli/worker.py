"""``spatline worker``: the no-data sweep, reminders, daily summaries and the mail sender.

Run it as its own process (several may run against PostgreSQL: they share work through
row locks and leases), or let ``spatline serve`` run one in a background thread when
``SPATLINE_RUN_WORKER_IN_SERVE`` is true (the one-computer set-up).
"""

from __future__ import annotations

import argparse
import datetime as dt
import logging
import threading
import time
from collections.abc import Callable

from sqlalchemy.exc import OperationalError
from sqlalchemy.orm import Session, sessionmaker

from app.settings import Settings

logger = logging.getLogger(__name__)

# Design default: a sweep every 30 s keeps a no-data alert within a minute of its level.
DEFAULT_INTERVAL_SECONDS = 30.0


def run_cycle(
    *, factory: sessionmaker[Session], settings: Settings, now: dt.datetime | None = None
) -> dict[str, int]:
    """One pass: sweep rules, write due daily summaries, send due mail. Returns counts."""
    from app.alerts.evaluation import sweep
    from app.alerts.sender import send_due
    from app.alerts.summary import write_daily_summaries
    from app.db import utcnow

    now = now or utcnow()
    with factory() as session, session.begin():
        swept = sweep(session=session, now=now)
    with factory() as session, session.begin():
        summaries = write_daily_summaries(session=session, now=now)
    counts = send_due(factory=factory, settings=settings, now=now)
    return {"rules_swept": swept, "summaries": summaries, **counts}


def run_forever(
    *,
    settings: Settings,
    interval: float = DEFAULT_INTERVAL_SECONDS,
    stop: threading.Event | None = None,
    once: bool = False,
) -> dict[str, int]:
    from app.db import make_engine, make_sessionmaker

    engine = make_engine(settings)
    factory = make_sessionmaker(engine)
    stop = stop or threading.Event()
    counts: dict[str, int] = {}
    try:
        while True:
            started = time.monotonic()
            try:
                counts = run_cycle(factory=factory, settings=settings)
            except OperationalError as error:
                # The database is busy or away; the next cycle tries again.
                logger.warning("worker cycle skipped: %s", error)
            if once:
                return counts
            if stop.wait(max(interval - (time.monotonic() - started), 1.0)):
                return counts
    finally:
        engine.dispose()


def start_background_worker(settings: Settings) -> Callable[[], None]:
    """Run the worker in a daemon thread of this process; returns the function that stops it."""
    stop = threading.Event()
    thread = threading.Thread(
        target=run_forever,
        kwargs={"settings": settings, "stop": stop},
        name="spatline-worker",
        daemon=True,
    )
    thread.start()

    def stop_worker() -> None:
        stop.set()
        thread.join(timeout=30)

    return stop_worker


def register(subparsers: argparse._SubParsersAction) -> None:
    worker = subparsers.add_parser(
        "worker",
        help="run the alert sweep, daily summaries and the mail sender",
        description="Evaluate no-data rules and reminders, write daily summaries and send the "
        "mail outbox over SMTP, every --interval seconds. Settings come from SPATLINE_* "
        "variables; without SPATLINE_SMTP_HOST mail waits in the outbox.",
    )
    worker.add_argument(
        "--interval",
        type=float,
        default=DEFAULT_INTERVAL_SECONDS,
        help="seconds between cycles (default %(default)s)",
    )
    worker.add_argument("--once", action="store_true", help="run one cycle and exit")
    worker.set_defaults(handler=_worker)


def _worker(args: argparse.Namespace) -> int:
    from app.cli.server import load_settings

    if args.interval <= 0:
        raise SystemExit("spatline worker: --interval must be more than 0 seconds")
    settings = load_settings()
    logging.basicConfig(level=logging.INFO, format="%(asctime)s %(levelname)s %(message)s")
    counts = run_forever(settings=settings, interval=args.interval, once=args.once)
    if args.once:
        print(", ".join(f"{name}: {value}" for name, value in counts.items()))
    return 0
