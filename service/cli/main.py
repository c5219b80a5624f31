"""Entry point of the `whichsense` command: builds the parser from the subcommand modules.

Start-up stays fast: the subcommand modules import only the standard library at
the top, so `whichsense --help` builds the whole argument tree without torch,
FastAPI or SQLAlchemy; each handler imports what its command needs. The
settings are read from the environment here, once, and handed to the handler.
"""

from __future__ import annotations

import argparse
import logging
import os
import sys
from collections.abc import Sequence
from typing import TYPE_CHECKING

from service import __version__
from service.cli import (
    bench,
    benchmark,
    calibrate,
    database,
    demo,
    evaluate,
    evidence,
    inventory,
    keys,
    serve,
    tag,
    teams,
    worker,
)

if TYPE_CHECKING:
    from service.config import Settings

SUBCOMMANDS = (database, teams, keys, inventory, serve, tag, evidence, calibrate, benchmark,
               bench, evaluate, worker, demo)


def build_parser() -> argparse.ArgumentParser:
    parser = argparse.ArgumentParser(
        prog="whichsense",
        description="Tell which sense of an ambiguous term each occurrence carries.",
    )
    parser.add_argument("--version", action="version", version=f"whichsense {__version__}")
    parser.add_argument("-v", "--verbose", action="store_true", help="log more")
    commands = parser.add_subparsers(dest="command", metavar="COMMAND", required=True)
    for module in SUBCOMMANDS:
        module.add_parser(commands)
    return parser


def main(argv: Sequence[str] | None = None, *, settings: Settings | None = None) -> int:
    """Run one command; `settings` default to the environment's (tests pass their own)."""
    os.environ.setdefault("HF_HUB_OFFLINE", "1")
    os.environ.setdefault("TRANSFORMERS_OFFLINE", "1")
    # OpenMP threads that wait at a barrier sleep instead of spinning: spinning threads burn
    # the core a descheduled sibling needs, so on a shared host 2 threads ran 2-7x slower
    # than 1 (docs/measurements.md, "Encoder threads"). libgomp reads it when torch loads.
    os.environ.setdefault("OMP_WAIT_POLICY", "PASSIVE")
    parser = build_parser()
    args = parser.parse_args(argv)
    logging.basicConfig(
        level=logging.DEBUG if args.verbose else logging.INFO,
        format="%(asctime)s %(levelname)s %(name)s: %(message)s",
    )
    if not args.verbose:
        for chatty in ("httpx", "alembic"):
            logging.getLogger(chatty).setLevel(logging.WARNING)

    from service.config import load_settings

    try:
        chosen = settings if settings is not None else load_settings()
        return int(args.func(args, chosen) or 0)
    except KeyboardInterrupt:
        return 130
    except Exception as exc:
        status = _report(exc)
        if status is None:
            raise
        return status


def _report(exc: Exception) -> int | None:
    """Print a user's error (bad input, missing object, unmigrated database) and return the
    exit status; None for anything else. The error types are imported only here, so that
    a command starts (and says what it does) before the database layer is loaded."""
    from service.inventory.document import InventoryInvalid
    from service.store.database import DatabaseNotMigrated
    from service.store.errors import Conflict, NotFound

    if isinstance(exc, InventoryInvalid):
        print(f"whichsense: invalid inventory: {exc}", file=sys.stderr)
        for problem in exc.problems[:50]:
            print(f"  {problem.pointer}: {problem.message}", file=sys.stderr)
        return 2
    if isinstance(exc, (NotFound, Conflict, DatabaseNotMigrated, OSError, ValueError)):
        print(f"whichsense: error: {exc}", file=sys.stderr)
        return 2
    return None


if __name__ == "__main__":
    sys.exit(main())
