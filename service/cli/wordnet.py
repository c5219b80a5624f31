"""`whichsense inventory wordnet NAME`: an inventory of WordNet 3.0 senses."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path

from service.cli.teams import add_team_option, team_id
from service.engine.lexicon import open_wordnet
from service.inventory.document import dump_document, spec_to_document
from service.wordnet.inventory import all_lemmas, build_wordnet_inventory


def add_wordnet_parser(actions: argparse._SubParsersAction) -> None:
    """Add `wordnet` under the `inventory` command group."""
    parser = actions.add_parser(
        "wordnet",
        help="build an inventory from WordNet 3.0 senses (sense keys as sense ids)",
        description="Build an inventory whose senses are WordNet 3.0 senses: one term per "
        "lemma, sense id = sense key, gloss = definition. Without -o the inventory is "
        "imported into the database (as a new version if NAME exists).",
    )
    parser.add_argument("name", help="inventory name")
    parser.add_argument(
        "--lemma",
        action="append",
        default=[],
        metavar="LEMMA",
        help="a lemma to include (repeatable); multi-word lemmas as 'sea bass'",
    )
    parser.add_argument(
        "--lemmas-from",
        type=Path,
        metavar="FILE",
        help="a file with one lemma per line ('#' starts a comment)",
    )
    parser.add_argument("--all", action="store_true", help="every lemma in WordNet (large)")
    parser.add_argument(
        "--pos", choices=("n", "v", "a", "r"), help="keep only senses of this part of speech"
    )
    parser.add_argument("--description", default="", help="inventory description")
    parser.add_argument(
        "-o",
        "--output",
        type=Path,
        metavar="FILE.json",
        help="write the inventory document here instead of importing it",
    )
    add_team_option(parser)
    parser.set_defaults(func=run_wordnet)


def read_lemma_file(path: Path) -> list[str]:
    lemmas = []
    for line in path.read_text(encoding="utf-8").splitlines():
        text = line.split("#", 1)[0].strip()
        if text:
            lemmas.append(text)
    return lemmas


def run_wordnet(args: argparse.Namespace) -> int:
    reader = open_wordnet()
    lemmas: list[str] = list(args.lemma)
    if args.lemmas_from:
        lemmas += read_lemma_file(args.lemmas_from)
    if args.all:
        lemmas += all_lemmas(reader, args.pos)
    if not lemmas:
        print("whichsense: give --lemma, --lemmas-from or --all", file=sys.stderr)
        return 2
    spec, missing = build_wordnet_inventory(
        reader, args.name, lemmas, pos=args.pos, description=args.description
    )
    for lemma in missing[:20]:
        print(f"not in WordNet{' as ' + args.pos if args.pos else ''}: {lemma}", file=sys.stderr)
    if len(missing) > 20:
        print(f"... and {len(missing) - 20} more lemmas not in WordNet", file=sys.stderr)
    if not spec.terms:
        print("whichsense: none of the lemmas is in WordNet; nothing written", file=sys.stderr)
        return 2
    document = spec_to_document(spec)
    document.pop("version", None)  # import decides the version
    senses = sum(len(term.senses) for term in spec.terms)
    if args.output:
        args.output.write_text(dump_document(document), encoding="utf-8")
        print(f"wrote {len(spec.terms)} terms, {senses} senses to {args.output}")
        return 0
    from service.store.database import session_scope
    from service.store.inventories import import_inventory_document

    with session_scope() as session:
        inventory = import_inventory_document(session, team_id(session, args.team), document)
        print(
            f"inventory '{inventory.name}' is now at version {inventory.version} "
            f"({len(spec.terms)} terms, {senses} senses)"
        )
    return 0
