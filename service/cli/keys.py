"""`whichsense keys create|list|revoke|rotate-secret`: API keys (shown once, stored hashed).

Every key belongs to one team (`--team`; may be left out while there is one
team, and on an empty database a team `default` is made)."""

from __future__ import annotations

import argparse
import json
from typing import TYPE_CHECKING

from service.cli.teams import add_team_option, team_id
from service.store.scopes import SCOPES

if TYPE_CHECKING:
    from service.config import Settings


def add_parser(commands: argparse._SubParsersAction) -> None:
    parser = commands.add_parser("keys", help="manage API keys")
    actions = parser.add_subparsers(dest="action", metavar="ACTION", required=True)
    create = actions.add_parser("create", help="create a key and print it once")
    create.add_argument("--scope", choices=SCOPES, required=True)
    create.add_argument("--label", default="", help="who or what uses the key")
    output = create.add_mutually_exclusive_group()
    output.add_argument(
        "--quiet",
        action="store_true",
        help="print one line: the API key, a space, the webhook signing secret",
    )
    output.add_argument(
        "--json",
        action="store_true",
        help="print key_id, team, scope, key and signing_secret as JSON",
    )
    add_team_option(create)
    create.set_defaults(func=run_create)
    listing = actions.add_parser("list", help="list keys (never their secrets)")
    listing.add_argument("--team", metavar="NAME", help="only this team's keys")
    listing.set_defaults(func=run_list)
    revoke = actions.add_parser("revoke", help="revoke a key by its id")
    revoke.add_argument("key_id")
    revoke.set_defaults(func=run_revoke)
    rotate = actions.add_parser(
        "rotate-secret", help="give a key a new webhook signing secret and print it once"
    )
    rotate.add_argument("key_id")
    rotate.set_defaults(func=run_rotate_secret)


def run_create(args: argparse.Namespace, settings: Settings) -> int:
    from service.store.database import session_scope
    from service.store.keys import create_key
    from service.store.models import Team

    with session_scope(settings) as session:
        team = team_id(session, args.team)
        issued = create_key(session, team, args.scope, args.label)
        team_name = session.get_one(Team, team).name
    if args.json:
        print(
            json.dumps(
                {
                    "key_id": issued.key_id,
                    "team": team_name,
                    "scope": issued.scope,
                    "key": issued.token,
                    "signing_secret": issued.signing_secret,
                }
            )
        )
        return 0
    if args.quiet:
        # Both secrets, or the signing secret could never be recovered: `read KEY SECRET`.
        print(f"{issued.token} {issued.signing_secret}")
        return 0
    print(f"key id:          {issued.key_id}")
    print(f"team:            {team_name}")
    print(f"scope:           {issued.scope}")
    print(f"API key:         {issued.token}")
    print(f"webhook secret:  {issued.signing_secret}")
    print("Store both now: the key is kept only as a hash and cannot be shown again.")
    return 0


def run_list(args: argparse.Namespace, settings: Settings) -> int:
    from service.store.database import session_scope
    from service.store.keys import list_keys
    from service.store.models import Team
    from service.store.teams import find_team

    with session_scope(settings) as session:
        only = find_team(session, args.team).id if args.team else None
        names = {team.id: team.name for team in session.query(Team)}
        for key in list_keys(session, only):
            state = f"revoked {key.revoked_at:%Y-%m-%d}" if key.revoked_at else "active"
            print(f"{key.key_id}\t{names[key.team_id]}\t{key.scope}\t{state}\t{key.label}")
    return 0


def run_revoke(args: argparse.Namespace, settings: Settings) -> int:
    from service.store.database import session_scope
    from service.store.keys import revoke_key

    with session_scope(settings) as session:
        key = revoke_key(session, args.key_id)
    print(f"revoked {key.key_id}")
    return 0


def run_rotate_secret(args: argparse.Namespace, settings: Settings) -> int:
    from service.store.database import session_scope
    from service.store.keys import rotate_signing_secret

    with session_scope(settings) as session:
        secret = rotate_signing_secret(session, args.key_id)
    print(secret)
    return 0
