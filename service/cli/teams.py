"""`whichsense teams create|list|retention`: the operator's view of teams.

Only this command line (the operator, with the database URL) creates teams and
keys; no HTTP route does. Commands that act on one team's inventories take
`--team NAME`, which may be left out while there is exactly one team.
"""

from __future__ import annotations

import argparse
import sys

from sqlalchemy import func, select
from sqlalchemy.orm import Session

from service.store.database import session_scope
from service.store.models import ApiKey, Batch, Inventory
from service.store.teams import choose_team, create_team, find_team, list_teams, set_retention


def add_parser(commands: argparse._SubParsersAction) -> None:
    parser = commands.add_parser("teams", help="create and list teams (operator only)")
    actions = parser.add_subparsers(dest="action", metavar="ACTION", required=True)
    create = actions.add_parser("create", help="create a team")
    create.add_argument("name")
    create.add_argument(
        "--retention-days",
        type=int,
        metavar="DAYS",
        help="delete documents and results of batches finished DAYS ago",
    )
    create.set_defaults(func=run_create)
    actions.add_parser(
        "list", help="list teams with their keys, inventories and batches"
    ).set_defaults(func=run_list)
    retention = actions.add_parser("retention", help="set or clear a team's retention")
    retention.add_argument("name")
    retention.add_argument("days", help="days after which finished batches are purged, or 'none'")
    retention.set_defaults(func=run_retention)


def add_team_option(parser: argparse.ArgumentParser) -> None:
    parser.add_argument(
        "--team", metavar="NAME", help="the team (may be left out while there is only one)"
    )


def team_id(session: Session, name: str | None) -> int:
    """The id of the named team, or of the only one (said on stderr when chosen)."""
    team, note = choose_team(session, name)
    if note:
        print(f"whichsense: {note}", file=sys.stderr)
    return team.id


def run_create(args: argparse.Namespace) -> int:
    with session_scope() as session:
        team = create_team(session, args.name, args.retention_days)
        print(f"created team '{team.name}'")
    return 0


def run_list(_args: argparse.Namespace) -> int:
    with session_scope() as session:
        for team in list_teams(session):
            counts = [
                session.scalar(
                    select(func.count()).select_from(model).where(model.team_id == team.id)
                )
                for model in (ApiKey, Inventory, Batch)
            ]
            retention = f"{team.retention_days} days" if team.retention_days else "kept"
            print(
                f"{team.name}\t{counts[0]} keys\t{counts[1]} inventories\t"
                f"{counts[2]} batches\tretention: {retention}"
            )
    return 0


def run_retention(args: argparse.Namespace) -> int:
    days = None if args.days.lower() in ("none", "off", "0") else int(args.days)
    with session_scope() as session:
        team = set_retention(session, find_team(session, args.name).id, days)
        shown = f"{team.retention_days} days" if team.retention_days else "none (kept)"
        print(f"team '{team.name}' retention: {shown}")
    return 0
