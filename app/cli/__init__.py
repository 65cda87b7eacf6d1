"""The ``spatline`` command line.

Each module in this package that defines ``register(subparsers)`` adds its own
sub-commands, so a feature's command lives next to nothing but itself.
"""

from __future__ import annotations

import argparse
import importlib
import pkgutil
import sys
from collections.abc import Sequence


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="spatline",
        description="Seawater carbonate chemistry for shellfish hatcheries.",
    )
    subparsers = parser.add_subparsers(dest="command", required=True, metavar="COMMAND")
    for module_info in sorted(pkgutil.iter_modules(__path__), key=lambda m: m.name):
        module = importlib.import_module(f"{__name__}.{module_info.name}")
        register = getattr(module, "register", None)
        if register is not None:
            register(subparsers)
    return parser


def main(argv: Sequence[str] | None = None) -> int:
    parser = build_parser()
    args = parser.parse_args(argv)
    result = args.handler(args)
    return int(result or 0)


if __name__ == "__main__":
    sys.exit(main())
