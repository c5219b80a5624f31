"""`whichsense db upgrade|current`: schema migrations."""

from __future__ import annotations

import argparse

from sqlalchemy.engine import make_url

from service.config import get_settings
from service.store.database import current_revision, engine_for, head_revision, upgrade


def add_parser(commands: argparse._SubParsersAction) -> None:
    parser = commands.add_parser("db", help="database schema migrations")
    actions = parser.add_subparsers(dest="action", metavar="ACTION", required=True)
    up = actions.add_parser("upgrade", help="migrate the database to this version's schema")
    up.add_argument("--revision", default="head", help="target revision (default: head)")
    up.set_defaults(func=run_upgrade)
    actions.add_parser("current", help="show the schema revision").set_defaults(func=run_current)


def _where() -> str:
    return make_url(get_settings().database_url).render_as_string(hide_password=True)


def run_upgrade(args: argparse.Namespace) -> int:
    upgrade(get_settings().database_url, args.revision)
    print(f"{_where()} is at revision {current_revision(engine_for(get_settings().database_url))}")
    return 0


def run_current(_args: argparse.Namespace) -> int:
    current = current_revision(engine_for(get_settings().database_url))
    print(f"{_where()}: revision {current or '(none)'}; this version needs {head_revision()}")
    return 0 if current == head_revision() else 1
