"""Entry point of the `whichsense` command: builds the parser from the subcommand modules."""

from __future__ import annotations

import argparse
import logging
import os
import sys
from collections.abc import Sequence

from service import __version__
from service.cli import database, inventory, keys, serve
from service.inventory.document import InventoryInvalid
from service.store.database import DatabaseNotMigrated
from service.store.errors import Conflict, NotFound


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="whichsense",
        description="Tell which sense of an ambiguous term each occurrence carries.",
    )
    parser.add_argument("--version", action="version", version=f"whichsense {__version__}")
    parser.add_argument("-v", "--verbose", action="store_true", help="log more")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    for module in (database, keys, inventory, serve):
        module.add_parser(commands)
    for name in (
        "tag", "evidence", "calibrate", "benchmark", "evaluate", "worker", "demo", "bench"
    ):
        _add_optional(commands, name)
    return parser


def _add_optional(commands: argparse._SubParsersAction, name: str) -> None:
    """Subcommands that live in their own module are wired when the module is present."""
    import importlib

    try:
        module = importlib.import_module(f"service.cli.{name}")
    except ModuleNotFoundError as exc:
        if exc.name != f"service.cli.{name}":
            raise
        return
    module.add_parser(commands)


def main(argv: Sequence[str] | None = None) -> int:
    os.environ.setdefault("HF_HUB_OFFLINE", "1")
    os.environ.setdefault("TRANSFORMERS_OFFLINE", "1")
    os.environ.setdefault("OMP_WAIT_POLICY", "PASSIVE")  # before torch loads: see engine/encoder
    parser = build_parser()
    args = parser.parse_args(argv)
    logging.basicConfig(
        level=logging.DEBUG if args.verbose else logging.INFO,
        format="%(asctime)s %(levelname)s %(name)s: %(message)s",
    )
    if not args.verbose:
        for chatty in ("httpx", "alembic.runtime.migration"):
            logging.getLogger(chatty).setLevel(logging.WARNING)
    try:
        return int(args.func(args) or 0)
    except KeyboardInterrupt:
        return 130
    except InventoryInvalid as exc:
        print(f"whichsense: invalid inventory: {exc}", file=sys.stderr)
        for problem in exc.problems[:50]:
            print(f"  {problem.pointer}: {problem.message}", file=sys.stderr)
        return 2
    except (NotFound, Conflict, DatabaseNotMigrated, OSError, ValueError) as exc:
        print(f"whichsense: error: {exc}", file=sys.stderr)
        return 2


if __name__ == "__main__":
    sys.exit(main())
