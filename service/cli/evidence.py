"""`whichsense evidence import FILE --inventory NAME`: store labeled occurrences as evidence."""

from __future__ import annotations

import argparse
import itertools
import sys
from collections import Counter
from pathlib import Path

from service.cli.teams import add_team_option, team_id
from service.evaluation.evidence_source import file_evidence, restrict_to_inventory
from service.wordnet.corpus import CorpusStats


def add_parser(commands: argparse._SubParsersAction) -> None:
    parser = commands.add_parser("evidence", help="add labeled occurrences to an inventory")
    actions = parser.add_subparsers(dest="action", metavar="ACTION", required=True)
    load = actions.add_parser(
        "import",
        help="store labeled occurrences (JSON Lines) or a sense-annotated corpus (.jsonl.gz)",
        description="Stream FILE and store each occurrence whose term and sense the inventory "
        "has. FILE is either labeled occurrences ({id, text, start, end, term, sense} per "
        "line) or a sense-annotated corpus (tokens + instances with WordNet sense keys), "
        "told apart by the first line. Occurrences the inventory cannot take are counted.",
    )
    load.add_argument("file", type=Path)
    load.add_argument("--inventory", required=True, metavar="NAME")
    load.add_argument("--limit", type=int, metavar="N", help="store at most N items")
    add_team_option(load)
    load.set_defaults(func=run)


def run(args: argparse.Namespace) -> int:
    from service.store.database import session_scope
    from service.store.evidence import add_evidence
    from service.store.inventories import load_inventory_spec

    corpus_stats = CorpusStats()
    skipped: Counter[str] = Counter()
    with session_scope() as session:
        team = team_id(session, args.team)
        spec = load_inventory_spec(session, team, args.inventory)
        fitting = restrict_to_inventory(file_evidence(args.file, corpus_stats), spec, skipped)
        if args.limit is not None:
            fitting = itertools.islice(fitting, max(0, args.limit))
        stored = add_evidence(session, team, args.inventory, fitting)
    print(f"stored {stored} evidence items in inventory '{args.inventory}'")
    if corpus_stats.instances:
        print(
            f"corpus: {corpus_stats.instances} instances, {corpus_stats.resolved} with a "
            f"WordNet sense; {corpus_stats.skipped_unresolved} skipped because no label "
            f"resolved ({corpus_stats.recovered_by_splitting} recovered by splitting packed keys)"
        )
    for reason, count in sorted(skipped.items()):
        print(f"skipped ({reason} for '{args.inventory}'): {count}", file=sys.stderr)
    return 0
