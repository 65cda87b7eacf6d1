"""``spatline serve`` and ``spatline migrate``."""

from __future__ import annotations

import argparse
import sys

from pydantic import ValidationError

from app.settings import Settings


def load_settings() -> Settings:
    """Settings from the environment, or exit with the reason when they are invalid."""
    try:
        return Settings()
    except ValidationError as error:
        messages = "; ".join(e["msg"].removeprefix("Value error, ") for e in error.errors())
        sys.exit(f"spatline: invalid settings: {messages}")


def register(subparsers: argparse._SubParsersAction) -> None:
    serve = subparsers.add_parser(
        "serve",
        help="serve the HTTP API (run `spatline migrate` first)",
        description="Serve the HTTP API with uvicorn. Settings come from SPATLINE_* variables.",
    )
    serve.add_argument(
        "--host", default="127.0.0.1", help="address to listen on (default %(default)s)"
    )
    serve.add_argument("--port", type=int, default=8000, help="port (default %(default)s)")
    serve.add_argument(
        "--workers", type=int, default=1, help="worker processes (default %(default)s)"
    )
    serve.set_defaults(handler=_serve)

    migrate = subparsers.add_parser(
        "migrate",
        help="create or upgrade the database tables",
        description="Apply the Alembic migrations to SPATLINE_DATABASE_URL.",
    )
    migrate.add_argument(
        "--revision", default="head", help="revision to upgrade to (default %(default)s)"
    )
    migrate.set_defaults(handler=_migrate)


def _serve(args: argparse.Namespace) -> int:
    import uvicorn

    settings = load_settings()  # fail here, with the reason, rather than inside every worker
    if args.workers < 1:
        sys.exit("spatline serve: --workers must be 1 or more")
    stop_worker = None
    if settings.run_worker_in_serve:
        from app.cli.worker import start_background_worker

        stop_worker = start_background_worker(settings)
    try:
        uvicorn.run(
            "app.main:create_app",
            factory=True,
            host=args.host,
            port=args.port,
            workers=args.workers,
            proxy_headers=True,
        )
    finally:
        if stop_worker is not None:
            stop_worker()
    return 0


def _migrate(args: argparse.Namespace) -> int:
    from app import migrate

    settings = load_settings()
    migrate.upgrade(settings, args.revision)
    print(f"Database at {_redacted(settings.database_url)} is at revision {args.revision}.")
    return 0


def _redacted(url: str) -> str:
    from sqlalchemy.engine import make_url

    return make_url(url).render_as_string(hide_password=True)
