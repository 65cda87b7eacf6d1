"""``spatline keys create | list | revoke``: API keys for people (device keys come from the
devices endpoint). The plaintext of a new key is printed once, on stdout, and never stored."""

from __future__ import annotations

import argparse
import datetime as dt
import sys

from sqlalchemy.exc import OperationalError, ProgrammingError
from sqlalchemy.orm import Session

from app.auth import keys
from app.cli.server import load_settings
from app.db import make_engine, make_sessionmaker


def register(subparsers: argparse._SubParsersAction) -> None:
    parser = subparsers.add_parser("keys", help="create, list or revoke API keys")
    actions = parser.add_subparsers(dest="keys_action", required=True, metavar="ACTION")

    create = actions.add_parser(
        "create",
        help="create a key and print it once",
        description="Create an API key. The key is printed once on stdout; store it now.",
    )
    create.add_argument("--role", required=True, choices=("admin", "viewer"))
    create.add_argument("--label", required=True, help="who or what holds the key")
    create.set_defaults(handler=_create)

    listing = actions.add_parser("list", help="list keys (prefixes only)")
    listing.set_defaults(handler=_list)

    revoke = actions.add_parser("revoke", help="revoke a key by its id")
    revoke.add_argument("key_id", type=int, metavar="ID")
    revoke.set_defaults(handler=_revoke)


def _with_session(action):  # type: ignore[no-untyped-def]
    engine = make_engine(load_settings())
    try:
        with make_sessionmaker(engine)() as session:
            return action(session)
    except (OperationalError, ProgrammingError) as error:
        sys.exit(
            f"spatline keys: the database is not ready ({error.orig}); run `spatline migrate`."
        )
    finally:
        engine.dispose()


def _create(args: argparse.Namespace) -> int:
    def action(session: Session) -> int:
        api_key, plaintext = keys.create_key(session=session, role=args.role, label=args.label)
        session.commit()
        print(
            f"Created {api_key.role} key {api_key.id} ({api_key.label}). "
            "It is shown only this once; store it now:",
            file=sys.stderr,
        )
        print(plaintext)
        return 0

    return _with_session(action)


def _list(args: argparse.Namespace) -> int:
    def action(session: Session) -> int:
        table = [("ID", "PREFIX", "ROLE", "STATE", "LAST USED (UTC)", "LABEL")]
        for api_key in keys.list_keys(session=session):
            last_used = (
                _utc(api_key.last_used_at).strftime("%Y-%m-%d %H:%M:%S")
                if api_key.last_used_at
                else "never"
            )
            table.append((
                str(api_key.id),
                api_key.prefix,
                api_key.role,
                "revoked" if api_key.revoked_at else "active",
                last_used,
                api_key.label + (f" [device {api_key.device_id}]" if api_key.device_id else ""),
            ))
        print(_aligned(table))
        return 0

    return _with_session(action)


def _revoke(args: argparse.Namespace) -> int:
    def action(session: Session) -> int:
        api_key = keys.revoke_key(session=session, key_id=args.key_id)
        if api_key is None:
            print(f"spatline keys: there is no key with id {args.key_id}.", file=sys.stderr)
            return 1
        session.commit()
        print(f"Key {api_key.id} ({api_key.label}) is revoked.")
        return 0

    return _with_session(action)


def _utc(moment: dt.datetime) -> dt.datetime:
    # Stored times are UTC; a driver may hand them back without the offset.
    return moment.replace(tzinfo=dt.UTC) if moment.tzinfo is None else moment.astimezone(dt.UTC)


def _aligned(table: list[tuple[str, ...]]) -> str:
    """Columns padded to their widest cell (the id right-aligned, the last left ragged)."""
    widths = [max(len(row[i]) for row in table) for i in range(len(table[0]) - 1)]
    lines = []
    for row in table:
        cells = [row[0].rjust(widths[0])] + [
            cell.ljust(width) for cell, width in zip(row[1:-1], widths[1:], strict=True)
        ]
        lines.append("  ".join([*cells, row[-1]]))
    return "\n".join(lines)
