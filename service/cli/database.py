"""`whichsense db upgrade|current`: schema migrations."""

from __future__ import annotations

import argparse
from typing import TYPE_CHECKING

if TYPE_CHECKING:
    from service.config import Settings


def add_parser(commands: argparse._SubParsersAction) -> None:
    parser = commands.add_parser("db", help="database schema migrations")
    actions = parser.add_subparsers(dest="action", metavar="ACTION", required=True)
    up = actions.add_parser("upgrade", help="migrate the database to this version's schema")
    up.add_argument("--revision", default="head", help="target revision (default: head)")
    up.set_defaults(func=run_upgrade)
    actions.add_parser("current", help="show the schema revision").set_defaults(func=run_current)


def _where(settings: Settings) -> str:
    from sqlalchemy.engine import make_url

    return make_url(settings.database_url).render_as_string(hide_password=True)


def run_upgrade(args: argparse.Namespace, settings: Settings) -> int:
    from service.store.database import current_revision, engine_for, upgrade

    upgrade(settings.database_url, args.revision)
    revision = current_revision(engine_for(settings.database_url))
    print(f"{_where(settings)} is at revision {revision}")
    return 0


def run_current(_args: argparse.Namespace, settings: Settings) -> int:
    from service.store.database import current_revision, engine_for, head_revision

    current = current_revision(engine_for(settings.database_url))
    needed = head_revision()
    print(f"{_where(settings)}: revision {current or '(none)'}; this version needs {needed}")
    return 0 if current == head_revision() else 1
