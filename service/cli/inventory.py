"""`whichsense inventory import|export|list`: inventories as files."""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from service.cli.teams import add_team_option, team_id
from service.inventory.csv_format import read_inventory_csv, write_inventory_csv
from service.inventory.document import dump_document
from service.store import inventories as repo
from service.store.database import session_scope


def add_parser(commands: argparse._SubParsersAction) -> None:
    parser = commands.add_parser("inventory", help="import, export and list sense inventories")
    actions = parser.add_subparsers(dest="action", metavar="ACTION", required=True)

    load = actions.add_parser("import", help="create or update an inventory from a file")
    load.add_argument("file", type=Path, help="inventory document (.json) or CSV (.csv)")
    load.add_argument("--name", help="inventory name (required for CSV)")
    add_team_option(load)
    load.set_defaults(func=run_import)

    dump = actions.add_parser("export", help="write an inventory to a file or stdout")
    dump.add_argument("name")
    dump.add_argument("-o", "--output", type=Path, help="file to write (default: stdout)")
    dump.add_argument("--format", choices=("json", "csv"), help="default: from -o's suffix")
    dump.add_argument("--version", type=int, help="an older version (default: current)")
    add_team_option(dump)
    dump.set_defaults(func=run_export)

    listing = actions.add_parser("list", help="list inventories")
    add_team_option(listing)
    listing.set_defaults(func=run_list)
    try:
        from service.cli.wordnet import add_wordnet_parser
    except ModuleNotFoundError as exc:
        if exc.name != "service.cli.wordnet":
            raise
    else:
        add_wordnet_parser(actions)


def read_document_file(path: Path, name: str | None = None) -> dict:
    """An inventory document from a .json or .csv file (CSV needs `name`)."""
    text = path.read_text(encoding="utf-8")
    if path.suffix.lower() == ".csv":
        if not name:
            raise ValueError("a CSV inventory needs --name")
        return read_inventory_csv(text, name)
    data = json.loads(text)
    if name:
        data["name"] = name
    return data


def run_import(args: argparse.Namespace) -> int:
    document = read_document_file(args.file, args.name)
    with session_scope() as session:
        inventory = repo.import_inventory_document(session, team_id(session, args.team), document)
        print(f"inventory '{inventory.name}' is now at version {inventory.version}")
    return 0


def run_export(args: argparse.Namespace) -> int:
    with session_scope() as session:
        inventory = repo.get_inventory(session, team_id(session, args.team), args.name)
        version = args.version or inventory.version
        document = repo.version_document(session, inventory, version)
    chosen = args.format or ("csv" if args.output and args.output.suffix == ".csv" else "json")
    text = write_inventory_csv(document) if chosen == "csv" else dump_document(document)
    if args.output:
        args.output.write_text(text, encoding="utf-8", newline="")
        print(f"wrote {args.name} version {version} to {args.output}", file=sys.stderr)
    else:
        sys.stdout.write(text)
    return 0


def run_list(args: argparse.Namespace) -> int:
    with session_scope() as session:
        for inventory in repo.list_inventories(session, team_id(session, args.team)):
            document = repo.current_document(session, inventory)
            senses = sum(len(t["senses"]) for t in document["terms"])
            print(
                f"{inventory.name}\tversion {inventory.version}\t"
                f"{len(document['terms'])} terms\t{senses} senses"
            )
    return 0
